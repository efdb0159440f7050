"""Command line: ``tumble COMMAND ...``. A thin layer over the science modules.

Each sub-command lives in its own module here with two functions,
``add_parser(subparsers)`` and ``run(args) -> int``; this module only wires
them together and turns errors into exit codes:

- 0: success;
- 2: bad input (a one-line message on stderr naming the file, row or column);
- 1: internal error (``--debug`` shows the traceback);
- 3: ``survey`` finished but every object is an error row (results written);
- 130 / 143: interrupted by SIGINT (Ctrl-C) / SIGTERM (work finished so far is kept).

Science modules are imported inside ``run`` so that ``tumble --help`` and
``tumble --version`` stay fast.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import re
import signal
import sys

from tumble import __version__

__all__ = ["main", "build_parser", "COMMANDS"]

#: Sub-command name -> module (under tumble.cli) that implements it.
COMMANDS = {
    "inspect": "inspect_cmd",
    "scan": "scan_cmd",
    "classify": "classify_cmd",
    "relax": "relax_cmd",
    "survey": "survey_cmd",
    "simulate": "simulate_cmd",
    "report": "report_cmd",
}


#: Exit code of a run stopped by SIGTERM (128 + 15, the shell convention).
EXIT_TERMINATED = 143
#: Exit code of a run stopped by SIGINT (128 + 2).
EXIT_INTERRUPTED = 130
#: argparse reads an argument that starts with '-' as an option unless it looks like a negative number;
#: ours also takes comma-separated numbers such as a western longitude, '--observatory -70.7,-30.2,2700'.
_NEGATIVE_NUMBERS = re.compile(r"^-(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?(,[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?)*$")


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised in the main thread like Ctrl-C so that every cleanup path runs."""


def _on_sigterm(signum, frame):
    raise Terminated()


class _Parser(argparse.ArgumentParser):
    """argparse with a one-line usage error and exit code 2 (bad input)."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self._negative_number_matcher = _NEGATIVE_NUMBERS

    def error(self, message):  # pragma: no cover - exercised through main()
        self.exit(2, f"{self.prog}: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser (used by ``main`` and by the docs check)."""
    parser = _Parser(
        prog="tumble",
        description="Principal-axis rotation or tumbling? Asteroid light-curve analysis.",
    )
    parser.add_argument("--version", action="version", version=f"tumble {__version__}")
    parser.add_argument("--debug", action="store_true", help="show full tracebacks on internal errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, module in COMMANDS.items():
        if importlib.util.find_spec(f"tumble.cli.{module}") is None:
            continue  # command not built yet in this version
        mod = importlib.import_module(f"tumble.cli.{module}")
        mod.add_parser(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code (0 ok, 2 bad input, 1 internal error)."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, usage errors
        return int(exc.code or 0)
    if args.command is None:
        parser.print_help()
        return 2
    from tumble.cli._common import check_options, printable
    from tumble.exceptions import TumbleError

    previous = signal.getsignal(signal.SIGTERM)
    try:
        signal.signal(signal.SIGTERM, _on_sigterm)
    except ValueError:  # not the main thread (e.g. called from a test thread): leave SIGTERM alone
        previous = None
    try:
        check_options(args)
        return int(args.run(args) or 0)
    except TumbleError as exc:
        print(f"tumble {args.command}: error: {printable(exc)}", file=sys.stderr)
        return 2
    except Terminated:
        print(f"tumble {args.command}: terminated (SIGTERM)", file=sys.stderr)
        return EXIT_TERMINATED
    except KeyboardInterrupt:
        print(f"tumble {args.command}: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:  # e.g. `tumble inspect ... | head`
        return 0
    except Exception as exc:  # internal error: one line unless --debug
        if getattr(args, "debug", False):
            raise
        print(
            f"tumble {args.command}: internal error: {type(exc).__name__}: {printable(exc)} "
            "(run with --debug for the traceback)",
            file=sys.stderr,
        )
        return 1
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)
