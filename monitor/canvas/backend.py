"""Choose vispy's application backend once per process: EGL (headless) or glfw (window).

vispy allows one backend per process; asking for the other one later raises
BackendUnavailable with a sentence instead of vispy's own error.
"""

from __future__ import annotations

import os

HEADLESS = "egl"
WINDOW = "glfw"

_chosen: str | None = None


class BackendUnavailable(RuntimeError):
    """The requested way of drawing cannot work here; the message is one sentence."""


def chosen() -> str | None:
    """The backend this process uses ("egl", "glfw"), or None before the first plot."""
    return _chosen


def use(kind: str):
    """Select `kind` ("egl" or "glfw") for this process and return the vispy Application.

    Raises BackendUnavailable when another backend was chosen before or the
    libraries are missing.
    """
    global _chosen
    if kind not in (HEADLESS, WINDOW):
        raise ValueError(f"kind = {kind!r} must be {HEADLESS!r} or {WINDOW!r}")
    if _chosen is not None and _chosen != kind:
        raise BackendUnavailable(
            f"this process already draws through {_chosen}, so it cannot also use {kind}; "
            "run the other kind of plot in a separate process")
    if kind == WINDOW and not (os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")):
        raise BackendUnavailable(
            "no display for the plot window: set DISPLAY (or run under Xvfb), "
            "or use 'tunetrace snapshot' to render to a PNG")
    if kind == HEADLESS:
        # Mesa's EGL picks a platform from this; surfaceless needs no X server.
        os.environ.setdefault("EGL_PLATFORM", "surfaceless")
    import vispy
    from vispy import app

    try:
        vispy.use(app=kind)
        application = app.use_app()
        application.native  # noqa: B018  (initialises the backend now, so failures show here)
    except Exception as exc:  # vispy raises RuntimeError/ImportError/OSError variously
        needs = ("Mesa's EGL (Debian: libegl1 libegl-mesa0 libgl1-mesa-dri)" if kind == HEADLESS
                 else "the glfw package and a working X display")
        raise BackendUnavailable(f"cannot draw through {kind} ({exc}); install {needs}") from exc
    if kind == WINDOW:
        # The terminal UI owns the terminal: vispy's log lines would tear its screen.
        # Failures reach LivePlot as exceptions and are shown as its reason instead.
        vispy.set_log_level("critical")
    _chosen = kind
    return application
