"""Start the window: ``edgewise gui [DATA | SESSION]``.

Before Qt is touched, :func:`qt_problem` checks that its platform plugin can start: on Linux
the X11 (xcb) plugin of Qt 6 needs system libraries that a bare machine may lack, and without
them Qt aborts the process. Instead, :func:`main` prints one line naming the packages to
install and returns a non-zero exit status.
"""

from __future__ import annotations

import ctypes.util
import os
import subprocess
import sys
from pathlib import Path

__all__ = ["main", "qt_problem", "XCB_PACKAGES", "autosave_location"]

#: Shared library (as ctypes.util.find_library names it) → Debian/Ubuntu package.
XCB_PACKAGES = {
    "xcb-cursor": "libxcb-cursor0",
    "xkbcommon-x11": "libxkbcommon-x11-0",
    "xcb-icccm": "libxcb-icccm4",
    "xcb-image": "libxcb-image0",
    "xcb-keysyms": "libxcb-keysyms1",
    "xcb-randr": "libxcb-randr0",
    "xcb-render-util": "libxcb-render-util0",
    "xcb-shape": "libxcb-shape0",
    "xcb-xinerama": "libxcb-xinerama0",
    "xcb-xkb": "libxcb-xkb1",
}

EXIT_NO_QT = 3

_PROBE = ("import sys\n"
          "from PySide6.QtWidgets import QApplication\n"
          "app = QApplication(sys.argv[:1])\n")


def _all_packages() -> str:
    return " ".join(XCB_PACKAGES.values())


def qt_problem(*, probe: bool = True) -> str | None:
    """One line saying why Qt's window system cannot start here, or None when it can.

    Parameters
    ----------
    probe : bool
        Also start a QApplication in a child process (catches what the library check
        cannot, at the cost of about half a second).
    """
    try:
        import PySide6  # noqa: F401
    except ImportError:
        return ("edgewise gui: PySide6 is not installed; install it with "
                "`pip install PySide6-Essentials`")
    platform = os.environ.get("QT_QPA_PLATFORM", "").split(":")[0].strip().lower()
    if not sys.platform.startswith("linux"):
        return None
    if platform and platform != "xcb":
        return None  # offscreen, wayland, vnc...: Qt reports its own problems politely
    if not platform and os.environ.get("WAYLAND_DISPLAY"):
        return None
    if not os.environ.get("DISPLAY"):
        return ("edgewise gui: no display found (DISPLAY is not set); run it inside a "
                "desktop session, or set QT_QPA_PLATFORM=offscreen for a headless run")
    missing = [pkg for lib, pkg in XCB_PACKAGES.items() if ctypes.util.find_library(lib) is None]
    if missing:
        return ("edgewise gui: Qt's X11 platform plugin cannot start: missing system "
                f"libraries; install them with `sudo apt-get install {' '.join(missing)}` "
                f"(Qt needs: {_all_packages()})")
    if probe:
        try:
            done = subprocess.run([sys.executable, "-c", _PROBE], capture_output=True,
                                  text=True, timeout=60)
        except (OSError, subprocess.TimeoutExpired):
            return None  # cannot tell; let Qt try
        if done.returncode != 0:
            lines = [ln.strip() for ln in done.stderr.splitlines() if ln.strip()]
            reason = next((ln for ln in lines if "platform plugin" in ln or "xcb" in ln),
                          lines[0] if lines else f"exit status {done.returncode}")
            if "connect to display" in reason:
                return (f"edgewise gui: cannot connect to the display "
                        f"{os.environ.get('DISPLAY')!r} ({reason[:120]}); start it inside a "
                        "desktop session, check DISPLAY, or set QT_QPA_PLATFORM=offscreen")
            return (f"edgewise gui: Qt cannot start its window system ({reason[:160]}); on "
                    f"Debian/Ubuntu install `sudo apt-get install {_all_packages()}`")
    return None


def autosave_location() -> Path:
    """Where the window keeps its autosave copy (``EDGEWISE_AUTOSAVE`` overrides)."""
    env = os.environ.get("EDGEWISE_AUTOSAVE")
    if env:
        return Path(env)
    base = os.environ.get("XDG_STATE_HOME") or (Path.home() / ".local" / "state")
    return Path(base) / "edgewise" / "autosave.edgewise"


def main(path: str | None = None) -> int:
    """Open the window, optionally on a data table or a ``.edgewise`` session.

    Returns
    -------
    int
        The application's exit status; :data:`EXIT_NO_QT` (with one line on stderr) when
        Qt cannot start.
    """
    problem = qt_problem(probe=not os.environ.get("EDGEWISE_SKIP_QT_PROBE"))
    if problem:
        print(problem, file=sys.stderr)
        return EXIT_NO_QT
    from PySide6.QtWidgets import QApplication

    from ._qt.window import MainWindow

    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setOrganizationName("Edgewise")
    app.setApplicationName("Edgewise")
    window = MainWindow(autosave_path=autosave_location())
    window.show()
    recovered = window.offer_recovery()
    if path and not recovered:
        window.open_path(path)
    return app.exec()


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main(sys.argv[1] if len(sys.argv) > 1 else None))
