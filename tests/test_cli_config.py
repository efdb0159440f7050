"""Command-line logging (-v/-q/--log-file), --config TOML files, --debug after the sub-command, progress bars."""

import json
import subprocess
import sys

import numpy as np
import pytest

from tumble.cli import build_parser, main


@pytest.fixture
def lc_csv(tmp_path):
    # a plain light curve (the values do not matter here: these tests exercise the option handling)
    rng = np.random.default_rng(4)
    t = np.sort(2460580.5 + rng.uniform(0, 2, 40))
    rows = ["time,mag"] + [f"{x:.6f},{15 + 0.1 * np.sin(x * 30):.4f}" for x in t]  # no error column
    path = tmp_path / "lc.csv"
    path.write_text("\n".join(rows) + "\n")
    return path


def test_config_supplies_options(tmp_path, lc_csv, capsys):
    assert main(["inspect", str(lc_csv), "--json"]) == 2  # no error column
    capsys.readouterr()
    cfg = tmp_path / "tumble.toml"
    cfg.write_text('default-err = 0.02\nworkers = 3\n\n[inspect]\nband = "Rc"\njson = true\n')
    assert main(["inspect", str(lc_csv), "--config", str(cfg)]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["bands"] == {"Rc": 40} and out["err_median"] == 0.02
    # the command line wins over the file
    assert main(["inspect", str(lc_csv), "--config", str(cfg), "--default-err", "0.05"]) == 0
    assert json.loads(capsys.readouterr().out)["err_median"] == 0.05


@pytest.mark.parametrize("text, message", [
    ("no_such_option = 1\n", "unknown key 'no_such_option' (no sub-command has --no-such-option)"),
    ("[inspect]\nworkers = 2\n", "[inspect] unknown key 'workers' (tumble inspect has no --workers)"),
    ("[nonsense]\nx = 1\n", "table [nonsense] is not a sub-command"),
    ("[survey]\nbogus = 1\n", "[survey] unknown key 'bogus'"),
    ("json = 3\n", "key 'json': expected true or false, got 3"),
    ("min-points = [1, 2]\n", "key 'min-points': expected one value, got a list"),
    ("min-points = \n", "not valid TOML"),
])
def test_bad_config_is_one_line(tmp_path, lc_csv, capsys, text, message):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(text)
    assert main(["inspect", str(lc_csv), "--config", str(cfg)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and str(cfg) in err[0] and message in err[0], err


def test_config_value_checked_like_the_command_line(tmp_path, lc_csv, capsys):
    cfg = tmp_path / "c.toml"
    cfg.write_text('time-format = "fortnights"\n')
    assert main(["inspect", str(lc_csv), "--config", str(cfg)]) == 2
    assert "invalid choice: 'fortnights'" in capsys.readouterr().err


def test_log_file_and_verbosity(tmp_path, lc_csv, capsys):
    log = tmp_path / "run.log"
    assert main(["-v", "inspect", str(lc_csv), "--default-err", "0.02", "--log-file", str(log)]) == 0
    err = capsys.readouterr().err
    assert "tumble: INFO: tumble" in err and "inspect started" in err
    text = log.read_text()
    assert "INFO tumble.cli: tumble" in text and "inspect finished in" in text
    # errors: one line on stderr as always, and recorded in the log file
    assert main(["inspect", str(lc_csv), "--log-file", str(log)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "magnitude-error column" in err[0]
    assert "ERROR tumble.cli:" in log.read_text()
    # -q: nothing but errors
    assert main(["-q", "inspect", str(lc_csv), "--default-err", "0.02"]) == 0
    assert capsys.readouterr().err == ""
    assert main(["inspect", str(lc_csv), "--log-file", str(tmp_path / "no" / "dir.log")]) == 2
    assert "--log-file" in capsys.readouterr().err


def test_debug_after_the_subcommand():
    args = build_parser().parse_args(["inspect", "x.csv", "--debug"])
    assert args.debug is True
    args = build_parser().parse_args(["--debug", "inspect", "x.csv"])
    assert args.debug is True
    assert build_parser().parse_args(["inspect", "x.csv"]).debug is False


def test_no_progress_bars_when_redirected(lc_csv, tmp_path):
    # stderr is a file here, not a terminal: no bar may reach it
    err = tmp_path / "err.txt"
    with open(err, "w") as fh:
        code = subprocess.run([sys.executable, "-m", "tumble", "scan", str(lc_csv), "--default-err", "0.02",
                               "--min-period-h", "0.5", "--max-period-h", "30"], stderr=fh, stdout=subprocess.DEVNULL,
                              check=False).returncode
    assert code == 0
    text = err.read_text()
    assert "it/s" not in text and "\r" not in text and "%|" not in text
