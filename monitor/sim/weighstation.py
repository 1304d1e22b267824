"""Signal model of the demo board: a conveyor weigh station (invented demo numbers).

Channels, in order, repeated with a suffix when more than three are asked for:
  load [kg]    load-cell bridge: tare plus parcels arriving as steps of random weight
  current [A]  belt motor current, rising with the load on the belt
  vib [g]      frame vibration: belt rumble plus a decaying knock when a parcel lands
Interference common to all: 50 Hz mains pickup, 18 Hz belt vibration, white
noise and rare single-sample spikes. Every number here is invented for the demo.
"""

from __future__ import annotations

import numpy as np

BASE_CHANNELS: tuple[tuple[str, str], ...] = (("load", "kg"), ("current", "A"), ("vib", "g"))
MAINS_HZ = 50.0
BELT_HZ = 18.0
KNOCK_HZ = 70.0


def channel_names(count: int) -> list[tuple[str, str]]:
    """(name, unit) of `count` channels: load, current, vib, load2, current2, ..."""
    names = []
    for i in range(count):
        name, unit = BASE_CHANNELS[i % 3]
        group = i // 3
        names.append((name if group == 0 else f"{name}{group + 1}", unit))
    return names


class WeighStation:
    """Generates the board's samples block by block, deterministically from a seed.

    rate_hz:  sample rate (Hz).
    channels: number of channels (>= 1).
    seed:     random seed; the same seed gives the same stream.
    """

    def __init__(self, rate_hz: float = 250.0, channels: int = 3, seed: int = 1) -> None:
        if not rate_hz > 0:
            raise ValueError(f"rate = {rate_hz!r} must be a positive number of Hz")
        if not 1 <= channels <= 64:
            raise ValueError(f"channels = {channels!r} must be between 1 and 64")
        self.rate_hz = float(rate_hz)
        self.channels = int(channels)
        self._rng = np.random.default_rng(seed)
        self._n = 0                      # samples generated so far
        self._parcel_kg = 0.0            # weight on the platform now
        self._next_event = self._draw_gap()
        self._knock_start = -10**9       # sample index of the last parcel landing
        self._phase = self._rng.uniform(0, 2 * np.pi, size=(self.channels, 2))

    def _draw_gap(self) -> int:
        return self._n + int(self._rng.uniform(1.5, 4.0) * self.rate_hz)

    def _load_profile(self, n: int) -> np.ndarray:
        """Parcel weight per sample for the next n samples (steps on and off)."""
        out = np.empty(n)
        i = 0
        while i < n:
            until = self._next_event - (self._n + i)
            if until <= 0:
                if self._parcel_kg == 0.0:
                    self._parcel_kg = float(self._rng.uniform(0.5, 25.0))
                    self._knock_start = self._n + i
                else:
                    self._parcel_kg = 0.0
                self._next_event = self._n + i + int(self._rng.uniform(1.0, 3.0) * self.rate_hz)
                continue
            take = min(n - i, until)
            out[i:i + take] = self._parcel_kg
            i += take
        return out

    def generate(self, n: int) -> np.ndarray:
        """The next n samples. Returns values: (n, channels) float64 in physical units."""
        t = (self._n + np.arange(n)) / self.rate_hz
        parcel = self._load_profile(n)
        since_knock = (self._n + np.arange(n) - self._knock_start) / self.rate_hz
        knock = np.where(since_knock >= 0, np.exp(-since_knock / 0.08), 0.0)
        out = np.empty((n, self.channels))
        rng = self._rng
        for c in range(self.channels):
            mains = np.sin(2 * np.pi * MAINS_HZ * t + self._phase[c, 0])
            belt = np.sin(2 * np.pi * BELT_HZ * t + self._phase[c, 1])
            kind = c % 3
            if kind == 0:      # load cell, kg
                x = 2.0 + parcel + 0.15 * mains + 0.08 * belt + 0.03 * rng.standard_normal(n)
                spike = 3.0
            elif kind == 1:    # motor current, A
                x = 1.2 + 0.02 * parcel + 0.05 * mains + 0.03 * belt
                x += 0.01 * rng.standard_normal(n)
                spike = 0.8
            else:              # frame vibration, g
                x = 0.05 * belt + 0.02 * np.sin(2 * np.pi * 2 * BELT_HZ * t)
                x += 0.3 * knock * np.sin(2 * np.pi * KNOCK_HZ * since_knock)
                x += 0.01 * mains + 0.01 * rng.standard_normal(n)
                spike = 0.5
            hits = rng.random(n) < 0.002
            x[hits] += spike * rng.choice((-1.0, 1.0), size=int(hits.sum()))
            out[:, c] = x
        self._n += n
        return out
