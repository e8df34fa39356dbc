"""Starting the window: when Qt's window system cannot start, one clear line, not an abort."""

import ctypes.util
import subprocess
import sys
from pathlib import Path

import pytest

from gui import app

from gui_data import ROOT


@pytest.fixture
def x11(monkeypatch):
    monkeypatch.setenv("QT_QPA_PLATFORM", "xcb")
    monkeypatch.setenv("DISPLAY", ":99")
    monkeypatch.delenv("WAYLAND_DISPLAY", raising=False)


def test_missing_xcb_library_names_the_packages(monkeypatch, x11, capsys):
    real = ctypes.util.find_library
    monkeypatch.setattr(ctypes.util, "find_library",
                        lambda name: None if name == "xcb-cursor" else real(name) or "lib.so")
    line = app.qt_problem(probe=False)
    assert line is not None and "\n" not in line
    assert "sudo apt-get install libxcb-cursor0" in line
    # the complete list from DESIGN.md §6 is named too
    for package in ("libxcb-cursor0", "libxkbcommon-x11-0", "libxcb-icccm4", "libxcb-image0",
                    "libxcb-keysyms1", "libxcb-randr0", "libxcb-render-util0",
                    "libxcb-shape0", "libxcb-xinerama0", "libxcb-xkb1"):
        assert package in line
    assert app.main(None) == app.EXIT_NO_QT
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "libxcb-cursor0" in err


def test_no_display_is_one_line(monkeypatch, x11):
    monkeypatch.delenv("DISPLAY")
    line = app.qt_problem(probe=False)
    assert "DISPLAY is not set" in line and "QT_QPA_PLATFORM=offscreen" in line


def test_offscreen_needs_no_check(monkeypatch):
    monkeypatch.setenv("QT_QPA_PLATFORM", "offscreen")
    assert app.qt_problem() is None


def free_display() -> str:
    """A display number no X server here uses: neither its socket nor its lock file exists
    (X servers create ``/tmp/.X11-unix/X<n>`` and ``/tmp/.X<n>-lock``; from memory of the
    X.Org server's conventions) and nothing listens on its TCP port 6000 + n."""
    import socket

    for n in range(197, 400):
        if Path(f"/tmp/.X11-unix/X{n}").exists() or Path(f"/tmp/.X{n}-lock").exists():
            continue
        with socket.socket() as probe:
            probe.settimeout(0.2)
            if probe.connect_ex(("127.0.0.1", 6000 + n)) == 0:
                continue
        return f":{n}"
    pytest.skip("no free X display number found between :197 and :399")


def test_free_display_skips_a_display_in_use(tmp_path, monkeypatch):
    first = free_display()
    lock = Path(f"/tmp/.X{first[1:]}-lock")
    try:
        lock.write_text("0\n")
    except OSError:
        pytest.skip("cannot write a lock file in /tmp")
    try:
        assert free_display() != first
    finally:
        lock.unlink()


def test_the_real_xcb_plugin_fails_politely_on_this_machine():
    """Here, in a subprocess: force the X11 plugin with a display that does not exist (one
    checked to be free); the result must be one line and a non-zero status, never Qt's abort
    (exit by signal)."""
    display = free_display()
    code = ("import os, sys; os.environ['QT_QPA_PLATFORM'] = 'xcb'; "
            f"os.environ['DISPLAY'] = '{display}'; os.environ.pop('WAYLAND_DISPLAY', None); "
            "os.environ.pop('EDGEWISE_SKIP_QT_PROBE', None); "
            "from gui.app import main; sys.exit(main(None))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          cwd=ROOT, timeout=120)
    assert done.returncode == app.EXIT_NO_QT
    lines = [ln for ln in done.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("edgewise gui:")
    # without the X11 libraries: what to install; with them: the display that is missing
    assert ("apt-get install" in lines[0]
            or f"cannot connect to the display '{display}'" in lines[0])
