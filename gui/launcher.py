"""Entry point of the ``loopwright`` command.

Engine commands (``check``, ``freq``, ...) run headless and never import Qt; anything else
(``loopwright``, ``loopwright FILE``, ``loopwright FILE --screenshot OUT.png``) opens the app.
"""
from __future__ import annotations

import argparse
import sys

__all__ = ["main"]


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    from loopwright.engine.cli import COMMANDS, main as cli_main

    if argv and (argv[0] in COMMANDS or argv[0] in ("-h", "--help", "--version")):
        if argv[0] in ("-h", "--help"):
            code = cli_main(argv)
            print("\nWithout a command: 'loopwright [FILE] [--screenshot OUT.png]' opens the desktop app.")
            return code
        return cli_main(argv)
    parser = argparse.ArgumentParser(prog="loopwright", description="Open the Loopwright desktop app.")
    parser.add_argument("file", nargs="?", help="diagram file (.lwd) to open")
    parser.add_argument("--screenshot", metavar="OUT.png", help="render the window offscreen to a PNG and exit")
    args = parser.parse_args(argv)
    if args.screenshot:
        import os

        os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from loopwright.gui.app import run_app

    return run_app(args.file, args.screenshot)


if __name__ == "__main__":
    sys.exit(main())
