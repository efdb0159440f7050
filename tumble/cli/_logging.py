"""Logging for the command line: the standard ``logging`` module, ``-v``/``-q`` and ``--log-file``.

The library logs to loggers under ``tumble``; warnings (``warnings.warn``) are
captured into the log too. Verbosity on the console: errors only (``-q``),
warnings (default), information (``-v``), debugging (``-vv``). The log file
receives information (debugging with ``-vv``) whatever the console shows.
"""

from __future__ import annotations

import logging
import sys
from dataclasses import dataclass

__all__ = ["LoggingSetup", "setup_logging", "console_level"]

#: Console formats: short; the file gets times and logger names for later reading.
CONSOLE_FORMAT = "tumble: %(levelname)s: %(message)s"
FILE_FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"
#: Loggers configured: the package's and the one that receives captured warnings.
LOGGERS = ("tumble", "py.warnings")


def console_level(verbose: int, quiet: bool) -> int:
    """Console log level from the number of ``-v`` and ``-q``."""
    if quiet:
        return logging.ERROR
    return {0: logging.WARNING, 1: logging.INFO}.get(verbose, logging.DEBUG)


class _NotFileOnly(logging.Filter):
    def filter(self, record):
        return not getattr(record, "file_only", False)


@dataclass
class LoggingSetup:
    """Handlers installed by :func:`setup_logging`, to be removed by :meth:`close`."""

    handlers: list
    old_levels: dict

    def close(self) -> None:
        """Remove the handlers and restore the loggers (main() may run many times in one process)."""
        for name in LOGGERS:
            logger = logging.getLogger(name)
            for h in self.handlers:
                logger.removeHandler(h)
            logger.setLevel(self.old_levels[name])
        for h in self.handlers:
            h.close()
        logging.captureWarnings(False)


def setup_logging(verbose: int = 0, quiet: bool = False, log_file: str | None = None) -> LoggingSetup:
    """Install console (stderr) and optional file handlers on the ``tumble`` logger.

    Raises
    ------
    OSError
        When the log file cannot be opened (the caller reports it in one line).
    """
    level = console_level(verbose, quiet)
    console = logging.StreamHandler(sys.stderr)
    console.setLevel(level)
    console.setFormatter(logging.Formatter(CONSOLE_FORMAT))
    console.addFilter(_NotFileOnly())
    handlers = [console]
    lowest = level
    if log_file:
        fh = logging.FileHandler(log_file, mode="a", encoding="utf-8")
        fh.setLevel(logging.DEBUG if verbose >= 2 else logging.INFO)
        fh.setFormatter(logging.Formatter(FILE_FORMAT))
        handlers.append(fh)
        lowest = min(lowest, fh.level)
    old = {}
    for name in LOGGERS:
        logger = logging.getLogger(name)
        old[name] = logger.level
        logger.setLevel(lowest)
        for h in handlers:
            logger.addHandler(h)
    logging.captureWarnings(True)
    return LoggingSetup(handlers, old)
