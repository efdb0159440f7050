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


#: Sub-commands whose ``--quiet`` means "no progress bars": set when stderr is not a terminal,
#: so that bars never end up in redirected logs.
PROGRESS_COMMANDS = ("scan", "classify", "relax", "survey", "report")


def _add_global_options(parser: argparse.ArgumentParser, *, top: bool) -> None:
    """Options accepted before and after the sub-command (after it, they default to 'not given')."""
    kw = {} if top else {"default": argparse.SUPPRESS}
    g = parser.add_argument_group("general") if not top else parser
    g.add_argument("--debug", action="store_true", help="show full tracebacks on internal errors", **kw)
    g.add_argument("-v", "--verbose", action="count", help="more log messages on stderr (-v information, -vv debugging)",
                   **({"default": 0} if top else kw))
    g.add_argument("--log-file", metavar="FILE", help="also write the log to FILE (appended)", **kw)
    g.add_argument("--config", metavar="FILE.toml",
                   help="option values from a TOML file whose keys are long options (see docs/commands.md)", **kw)


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser (used by ``main`` and by the docs check)."""
    parser = _Parser(
        prog="tumble",
        description="Principal-axis rotation or tumbling? Asteroid light-curve analysis.",
    )
    parser.add_argument("--version", action="version", version=f"tumble {__version__}")
    _add_global_options(parser, top=True)
    parser.add_argument("-q", dest="log_quiet", action="store_true",
                        help="errors only on stderr, and no progress bars")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, module in COMMANDS.items():
        if importlib.util.find_spec(f"tumble.cli.{module}") is None:
            continue  # command not built yet in this version
        mod = importlib.import_module(f"tumble.cli.{module}")
        mod.add_parser(sub)
        _add_global_options(sub.choices[name], top=False)
    return parser


def _subparsers(parser: argparse.ArgumentParser) -> dict[str, argparse.ArgumentParser]:
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return dict(action.choices)


def _parse(parser, argv: list[str]):
    """Parse, then re-parse with the ``--config`` file's settings before the command line's own."""
    args = parser.parse_args(argv)
    if args.command is None or not getattr(args, "config", None):
        return args
    from tumble.cli._config import config_argv

    extra = config_argv(args.config, args.command, _subparsers(parser))
    if not extra:
        return args
    at = argv.index(args.command) + 1
    return parser.parse_args(argv[:at] + extra + argv[at:])


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code (0 ok, 2 bad input, 1 internal error, 3 every
    survey object failed, 130 interrupted, 143 terminated)."""
    from tumble.exceptions import TumbleError

    parser = build_parser()
    argv = list(sys.argv[1:] if argv is None else argv)
    try:
        args = _parse(parser, argv)
    except SystemExit as exc:  # --help, --version, usage errors
        return int(exc.code or 0)
    except TumbleError as exc:  # the --config file
        print(f"tumble: error: {' '.join(str(exc).split())}", file=sys.stderr)
        return 2
    if args.command is None:
        parser.print_help()
        return 2
    if args.command in PROGRESS_COMMANDS and (args.log_quiet or not sys.stderr.isatty()):
        args.quiet = True  # progress bars only on a terminal
    from tumble.cli._logging import setup_logging

    try:
        logs = setup_logging(args.verbose, args.log_quiet, args.log_file)
    except OSError as exc:
        print(f"tumble {args.command}: error: --log-file {args.log_file}: cannot be written "
              f"({exc.strerror or exc})", file=sys.stderr)
        return 2
    try:
        return _run(args)
    finally:
        logs.close()


def _run(args) -> int:
    import logging
    import time

    from tumble.cli._common import check_options, printable
    from tumble.exceptions import TumbleError

    log = logging.getLogger("tumble.cli")
    t0 = time.perf_counter()
    log.info("tumble %s %s started", __version__, args.command)
    previous = signal.getsignal(signal.SIGTERM)
    try:
        signal.signal(signal.SIGTERM, _on_sigterm)
    except ValueError:  # not the main thread (e.g. called from a test thread): leave SIGTERM alone
        previous = None
    try:
        check_options(args)
        code = int(args.run(args) or 0)
        log.info("tumble %s finished in %.1f s (exit %d)", args.command, time.perf_counter() - t0, code)
        return code
    except TumbleError as exc:
        msg = printable(exc)
        log.error("%s", msg, extra={"file_only": True})
        print(f"tumble {args.command}: error: {msg}", file=sys.stderr)
        return 2
    except Terminated:
        print(f"tumble {args.command}: terminated (SIGTERM)", file=sys.stderr)
        return EXIT_TERMINATED
    except KeyboardInterrupt:
        log.error("interrupted", extra={"file_only": True})
        print(f"tumble {args.command}: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:  # e.g. `tumble inspect ... | head`
        return 0
    except Exception as exc:  # internal error: one line unless --debug
        log.error("internal error", exc_info=True, extra={"file_only": True})
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
