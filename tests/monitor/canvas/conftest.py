"""Fixtures for plot tests: headless OpenGL through EGL, and pixel helpers.

Render tests draw through Mesa's software renderer (EGL_PLATFORM=surfaceless)
in this process; vispy allows one backend per process, so window tests run
their plot in a child process. Outside CI a missing library skips; under CI
it fails.
"""

from __future__ import annotations

import os

import pytest


def need(what: str, available: bool, why: str = "") -> None:
    """Skip (outside CI) or fail (under CI) when `what` is not available."""
    if available:
        return
    message = f"{what} is not available here{': ' + why if why else ''}"
    if os.environ.get("CI"):
        pytest.fail(message + " (required under CI)")
    pytest.skip(message)


@pytest.fixture(scope="session")
def headless():
    """The vispy application drawing through EGL (skips/fails when EGL cannot start)."""
    from monitor.canvas import backend

    try:
        return backend.use(backend.HEADLESS)
    except backend.BackendUnavailable as exc:
        need("headless OpenGL (EGL)", False, str(exc))
