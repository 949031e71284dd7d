"""Entry point of the ``loopwright`` command.

Engine commands (``check``, ``freq``, ...) run headless and never import Qt; anything else
(``loopwright``, ``loopwright FILE``, ``loopwright FILE --screenshot OUT.png``) opens the app.
"""
from __future__ import annotations

import argparse
import difflib
import os
import re
import sys

__all__ = ["main"]

# What a mistyped command looks like: one bare word, no folder and no file suffix.
_COMMAND_LIKE = re.compile(r"^[A-Za-z][A-Za-z0-9_-]*$")


def _unknown_command(argv: list[str], commands: tuple[str, ...]) -> str | None:
    """The one-line message for a mistyped command, or None when ``argv`` is meant for the app.

    A first word that is not an existing file and looks like a command (``chek``,
    ``frobnicate``: a bare word, no folder, no suffix) is a command the user mistyped, with
    or without a file after it; opening the app on a new diagram called ``chek`` would
    hide the slip.
    """
    word = argv[0]
    if not _COMMAND_LIKE.match(word) or os.path.exists(word):
        return None
    close = difflib.get_close_matches(word, commands, n=1, cutoff=0.6)
    hint = f"did you mean {close[0]}?" if close else f"commands are {', '.join(commands)}"
    return f"loopwright: unknown command {word!r}; {hint}"


class _AppParser(argparse.ArgumentParser):
    def error(self, message: str):  # one line and exit 2, like the commands' parsers
        from loopwright.engine.cli import one_line

        self.exit(2, one_line(f"{self.prog}: {message} (see '{self.prog} --help')") + "\n")


def _offscreen_diagram_renderer():
    """The canvas renderer for ``report --html``, offscreen; None when PySide6 is not installed.

    The engine then draws a plain block sketch and the report says which picture it holds.
    """
    import importlib.util

    if importlib.util.find_spec("PySide6") is None:
        return None

    def render(diagram) -> str | None:
        import os

        # No window is shown: the offscreen platform needs no display, also on a desktop.
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
        try:
            from PySide6.QtWidgets import QApplication

            from loopwright.gui.report_action import diagram_svg

            app = QApplication.instance() or QApplication(sys.argv[:1])  # noqa: F841 - kept alive while drawing
            return diagram_svg(diagram)
        except ImportError:
            return None  # Qt present but its libraries are not: the engine's sketch will do

    return render


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    from loopwright.engine.cli import COMMANDS, main as cli_main

    if argv and (argv[0] in COMMANDS or argv[0] in ("-h", "--help", "--version")):
        if argv[0] in ("-h", "--help"):
            code = cli_main(argv)
            print("\nWithout a command: 'loopwright [FILE] [--screenshot OUT.png]' opens the desktop app.")
            return code
        if argv[0] == "report" and any(a == "--html" or a.startswith("--html=") for a in argv):
            return cli_main(argv, diagram_renderer=_offscreen_diagram_renderer())
        return cli_main(argv)
    if argv:
        message = _unknown_command(argv, COMMANDS)
        if message is not None:
            from loopwright.engine.cli import one_line

            print(one_line(message), file=sys.stderr)
            return 2
    parser = _AppParser(prog="loopwright", description="Open the Loopwright desktop app.")
    parser.add_argument("file", nargs="?", help="diagram file (.lwd) to open")
    parser.add_argument("--screenshot", metavar="OUT.png", help="render the window offscreen to a PNG and exit")
    args = parser.parse_args(argv)
    if args.screenshot:
        os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    missing = missing_xcb_packages()
    if missing:
        print(xcb_message(missing), file=sys.stderr)
        return 1
    from loopwright.gui.app import run_app

    return run_app(args.file, args.screenshot)


# Libraries Qt's X11 (xcb) platform plugin loads, by soname, with the Debian/Ubuntu package
# that ships each (read from the plugin's dependencies with ldd, PySide6 6.11). The first
# three are the ones a fresh desktop install most often lacks.
XCB_LIBRARIES = {
    "libxcb-cursor.so.0": "libxcb-cursor0",
    "libxcb-icccm.so.4": "libxcb-icccm4",
    "libxcb-keysyms.so.1": "libxcb-keysyms1",
    "libxcb-image.so.0": "libxcb-image0",
    "libxcb-render-util.so.0": "libxcb-render-util0",
    "libxcb-randr.so.0": "libxcb-randr0",
    "libxcb-shape.so.0": "libxcb-shape0",
    "libxcb-xkb.so.1": "libxcb-xkb1",
    "libxcb-util.so.1": "libxcb-util1",
    "libxkbcommon-x11.so.0": "libxkbcommon-x11-0",
}


def _platform_is_xcb(env) -> bool:
    """Whether Qt will open its X11 platform: on Linux, asked for by name, or by default
    outside a Wayland session."""
    if not sys.platform.startswith("linux"):
        return False
    asked = env.get("QT_QPA_PLATFORM", "")
    if asked:
        return asked.split(";")[0].split(":")[0].strip() == "xcb"
    return not (env.get("WAYLAND_DISPLAY") and env.get("XDG_SESSION_TYPE") == "wayland")


def _loads(soname: str) -> bool:
    import ctypes

    try:
        ctypes.CDLL(soname)
    except OSError:
        return False
    return True


def missing_xcb_packages(env=None, *, loads=_loads) -> list[str]:
    """The system packages Qt's X11 platform needs and cannot find (empty when it needs none).

    Runs before any Qt import: without these, Qt aborts with a page of plugin errors instead
    of one line. ``loads(soname)`` says whether the dynamic loader finds a library (tests
    pass their own to simulate a missing one).
    """
    env = os.environ if env is None else env
    if not _platform_is_xcb(env):
        return []
    return [pkg for soname, pkg in XCB_LIBRARIES.items() if not loads(soname)]


def xcb_message(packages: list[str]) -> str:
    """The one line printed instead of Qt's abort."""
    return (
        f"loopwright: the desktop app needs Qt's X11 libraries, missing here: {', '.join(packages)} "
        f"(install them, e.g. 'sudo apt-get install {' '.join(packages)}'; the commands such as 'loopwright check FILE' need none)"
    )


if __name__ == "__main__":
    sys.exit(main())
