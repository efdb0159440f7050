"""Every long option of every sub-command appears in the user documentation (docs/*.md).

The parser is built the way ``tumble --help`` builds it (tumble.cli.build_parser, which imports
neither numpy nor astropy), and every sub-parser's option strings are collected from argparse.
"""

from __future__ import annotations

import argparse
import re
from pathlib import Path

import pytest

DOCS = Path(__file__).resolve().parents[1] / "docs"


def _subparsers():
    from tumble.cli import build_parser

    parser = build_parser()
    actions = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
    assert actions, "the CLI has sub-commands"
    return parser, dict(actions[0].choices)


def _long_options(parser):
    return sorted({s for a in parser._actions for s in a.option_strings if s.startswith("--")} - {"--help"})


def _docs_text():
    files = sorted(DOCS.glob("*.md"))
    assert files
    return "\n".join(f.read_text(encoding="utf-8") for f in files)


def test_every_subcommand_is_documented():
    _, subs = _subparsers()
    text = _docs_text()
    for name in subs:
        assert re.search(rf"tumble {re.escape(name)}\b", text), f"no 'tumble {name}' in docs/*.md"


@pytest.mark.parametrize("command", sorted(_subparsers()[1]))
def test_every_long_option_is_documented(command):
    _, subs = _subparsers()
    text = _docs_text()
    missing = [o for o in _long_options(subs[command]) if not re.search(rf"{re.escape(o)}(?![A-Za-z0-9-])", text)]
    assert not missing, f"tumble {command}: options missing from docs/*.md: {', '.join(missing)}"


def test_top_level_options_documented():
    parser, _ = _subparsers()
    text = _docs_text()
    for o in _long_options(parser):
        assert re.search(rf"{re.escape(o)}(?![A-Za-z0-9-])", text), o


def test_docs_have_a_cautions_section():
    text = _docs_text()
    assert re.search(r"^#+ Cautions", text, flags=re.M)
    assert "not operational decisions" in text


def test_help_texts_print_no_doubled_percent():
    # argparse %-formats help strings but prints descriptions as written (Python's argparse documentation),
    # so a '%%' in a description reaches the user as '%%'
    parser, subs = _subparsers()
    for name, sub in {"tumble": parser, **subs}.items():
        text = sub.format_help()
        assert "%%" not in text, f"{name} --help prints '%%'"
