"""Bench part "render": frames per second of the plot on the software renderer.

Setting (issue 6): a 1280x800 canvas, 8 channels raw and filtered, a 10-minute
window at 1 kHz (600 000 samples per channel) held in a real Ring. Each frame
is what the live window does each pump: 1000/60 new samples are written to the
ring, the plot pulls them, the time lanes are redrawn (autoscaled), the Welch
spectrum is recomputed every 15th frame (4 Hz at 60 frames/s), and the frame is
drawn into an offscreen buffer and waited for (glFinish), as a window would
before its buffer swap (EGL here has no on-screen surface; no read-back).

Two runs on the same data in the same process:
  render_fps             min/max decimation per pixel column (the plot as shipped)
  render_undecimated_fps every sample handed to the renderer (the reference)
Targets: render_fps >= 30 and render_speedup = ratio >= 5.

vispy allows one backend per process, so the measurement runs in a child
process with EGL_PLATFORM=surfaceless (no display needed).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time

SIZE = (1280, 800)
CHANNELS = 8
RATE_HZ = 1000.0
WINDOW_S = 600.0
FPS_TARGET = 30.0
SPEEDUP_TARGET = 5.0


def run(quick: bool) -> dict[str, float | int | str | bool]:
    """Measure in a child process; raises OSError when headless OpenGL cannot run here."""
    env = dict(os.environ, EGL_PLATFORM="surfaceless")
    command = [sys.executable, "-m", "monitor.bench.render"] + (["--quick"] if quick else [])
    done = subprocess.run(command, env=env, capture_output=True, text=True, timeout=600)
    if done.returncode != 0:
        last = (done.stderr.strip().splitlines() or ["no output"])[-1]
        raise OSError(f"the headless render child failed: {last}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def _frames(plot, ring, history, state, frames: int, new_per_frame: float
            ) -> tuple[float, float]:
    """Draw `frames` frames as the live window would: (frames per second, CPU ms per frame).

    CPU time is the whole process's (the renderer's threads included)."""
    import numpy as np

    from monitor.canvas.plotcanvas import ViewState  # noqa: F401  (state is a ViewState)

    rng = np.random.default_rng(11)
    written = 0.0
    t_next = ring.latest(1).t_host[-1]
    start, cpu_start = time.perf_counter(), time.process_time()
    for frame in range(frames):
        written += new_per_frame
        n = int(written)
        written -= n
        t = t_next + np.arange(1, n + 1) / RATE_HZ
        t_next = t[-1]
        raw = rng.standard_normal((n, CHANNELS))
        ring.write(t, raw, raw * 0.2)
        history.pull(ring)
        plot.show_traces(history, state)
        if frame % 15 == 0:
            plot.show_spectrum(history, 0, [])
        plot.decorate(0)
        plot.draw_offscreen()
    cpu_ms = (time.process_time() - cpu_start) / frames * 1000
    return frames / (time.perf_counter() - start), cpu_ms


def _measure(quick: bool) -> dict[str, float | int | str | bool]:
    import numpy as np

    from monitor.canvas import backend
    from monitor.canvas.history import History
    from monitor.canvas.plotcanvas import PlotCanvas, ViewState
    from monitor.ring import Ring

    app = backend.use(backend.HEADLESS)
    window_s = 60.0 if quick else WINDOW_S
    samples = int(window_s * RATE_HZ)
    rng = np.random.default_rng(3)
    ring = Ring(CHANNELS, samples)
    t = np.arange(samples) / RATE_HZ
    # a weigh-station-like signal: slow steps, mains, noise (invented demo numbers)
    raw = (np.cumsum(rng.standard_normal((samples, CHANNELS)), axis=0) * 0.01
           + 0.3 * np.sin(2 * np.pi * 50 * t)[:, None]
           + 0.1 * rng.standard_normal((samples, CHANNELS)))
    ring.write(t, raw, raw * 0.5)
    del raw
    names = [f"ch{i}" for i in range(CHANNELS)]
    results: dict[str, float | int | str | bool] = {}
    for decimate, frames, key in ((True, 20 if quick else 120, "render"),
                                  (False, 2 if quick else 5, "render_undecimated")):
        plot = PlotCanvas(names, ["g"] * CHANNELS, RATE_HZ, size=SIZE, app=app)
        history = History(CHANNELS, samples)
        history.pull(ring)
        state = ViewState(window_s=window_s, decimate=decimate)
        plot.show_response(0, [])
        _frames(plot, ring, history, state, 3 if decimate else 1, RATE_HZ / 60)  # warm-up
        fps, cpu_ms = _frames(plot, ring, history, state, frames, RATE_HZ / 60)
        results[f"{key}_fps"] = fps
        results[f"{key}_cpu_ms_per_frame"] = cpu_ms
        plot.close()
    speedup = results["render_fps"] / results["render_undecimated_fps"]
    from vispy.gloo import gl

    results.update({
        "render_window_samples_per_channel": samples,
        "render_speedup": speedup,
        "render_fps_ok": results["render_fps"] >= FPS_TARGET,
        "render_speedup_ok": speedup >= SPEEDUP_TARGET,
        "render_renderer": str(gl.glGetParameter(gl.GL_RENDERER)).split(" (")[0],
        # other work on the machine lowers frames/s; the load says how busy it was
        "render_load_average_1min": os.getloadavg()[0],
    })
    return results


if __name__ == "__main__":
    print(json.dumps(_measure("--quick" in sys.argv[1:])))
