"""``--config FILE.toml``: option values from a TOML file whose keys are the long options.

Keys are long option names without the dashes (``min-points = 5`` or
``min_points = 5``). Top-level keys apply to every sub-command that has the
option; a table named after a sub-command (``[survey]``) applies to it alone.
A key that is no option of any sub-command (or, in a table, of that
sub-command) is an error. Values on the command line win over the file.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from tumble.exceptions import TumbleError

__all__ = ["ConfigError", "config_argv"]


class ConfigError(TumbleError, ValueError):
    """A configuration file that cannot be read or holds an unknown key or a bad value."""


def _load(path: str) -> dict:
    import tomllib

    p = Path(path)
    if not p.is_file():
        raise ConfigError(f"{path}: no such configuration file")
    try:
        return tomllib.loads(p.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: not UTF-8 text") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML ({exc})") from None


def _long_options(parser: argparse.ArgumentParser) -> dict[str, argparse.Action]:
    out = {}
    for action in parser._actions:
        for opt in action.option_strings:
            if opt.startswith("--"):
                out[opt[2:]] = action
    return out


def _args_for(path: str, key: str, value, action: argparse.Action) -> list[str]:
    opt = next(o for o in action.option_strings if o.startswith("--"))
    where = f"{path}: key '{key}'"
    if isinstance(action, (argparse._StoreTrueAction, argparse._StoreFalseAction)):
        if not isinstance(value, bool):
            raise ConfigError(f"{where}: expected true or false, got {value!r}")
        flag_value = isinstance(action, argparse._StoreTrueAction)
        return [opt] if value == flag_value else []
    if isinstance(action, argparse._CountAction):
        if isinstance(value, bool) or not isinstance(value, int) or value < 0:
            raise ConfigError(f"{where}: expected a count (0, 1, 2, ...), got {value!r}")
        return [opt] * value
    if isinstance(action, (argparse._HelpAction, argparse._VersionAction)) or key == "config":
        raise ConfigError(f"{where}: not allowed in a configuration file")
    if isinstance(value, (dict,)):
        raise ConfigError(f"{where}: expected a value, got a table")
    if isinstance(value, list):
        if action.nargs in ("+", "*") or (isinstance(action.nargs, int) and action.nargs > 1):
            return [opt, *(str(v) for v in value)]
        if isinstance(action, argparse._AppendAction):
            return [x for v in value for x in (opt, str(v))]
        raise ConfigError(f"{where}: expected one value, got a list")
    if isinstance(value, bool):
        raise ConfigError(f"{where}: expected a value, got {str(value).lower()}")
    return [opt, str(value)]


def config_argv(path: str, command: str, subparsers: dict[str, argparse.ArgumentParser]) -> list[str]:
    """Command-line arguments equivalent to the file's settings for ``command``.

    Parameters
    ----------
    path : str
        The TOML file.
    command : str
        The sub-command being run.
    subparsers : dict of str -> ArgumentParser
        Every sub-command's parser (to tell keys of other sub-commands from unknown keys).

    Raises
    ------
    ConfigError
        One line naming the file and the key.
    """
    data = _load(path)
    mine = _long_options(subparsers[command])
    known_anywhere = set().union(*(_long_options(p) for p in subparsers.values()))
    out: list[str] = []
    tables = {k: v for k, v in data.items() if isinstance(v, dict)}
    for key, value in data.items():
        if key in tables:
            if key not in subparsers:
                raise ConfigError(f"{path}: table [{key}] is not a sub-command ({', '.join(subparsers)})")
            continue
        name = key.replace("_", "-")
        if name not in known_anywhere:
            raise ConfigError(f"{path}: unknown key '{key}' (no sub-command has --{name})")
        if name in mine:
            out += _args_for(path, key, value, mine[name])
    for key, value in tables.get(command, {}).items():
        name = key.replace("_", "-")
        if name not in mine:
            raise ConfigError(f"{path}: [{command}] unknown key '{key}' (tumble {command} has no --{name})")
        out += _args_for(path, f"{command}.{key}", value, mine[name])
    for table, values in tables.items():  # keys of other sub-commands' tables are checked too
        if table == command:
            continue
        theirs = _long_options(subparsers[table])
        for key in values:
            if key.replace("_", "-") not in theirs:
                raise ConfigError(f"{path}: [{table}] unknown key '{key}' (tumble {table} has no --{key.replace('_', '-')})")
    return out
