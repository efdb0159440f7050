"""`tumble inspect` and the command-line contract: exit codes, one-line errors, JSON."""

import subprocess
import sys

import pytest

from tumble.cli import main
from tumble.schema import loads_strict

from conftest import BAD_DIR

# Every malformed file and the problem its one-line message must name.
BAD_FILES = {
    "empty.csv": ("file is empty", []),
    "header_only.csv": ("header only", []),
    "comments_only.txt": ("no header line", []),
    "no_time_column.csv": ("no time column", []),
    "no_mag_column.csv": ("no magnitude or flux column", []),
    "no_err_column.csv": ("no magnitude-error column", []),
    "non_numeric_mag.csv": ("line 7, column 'mag': 'abc' is not a number", []),
    "nan_time.csv": ("line 6, column 'jd': time is NaN", []),
    "inf_time.csv": ("line 6, column 'jd': time is infinite", []),
    "negative_err.csv": ("line 8, column 'err': magnitude error is non-positive", []),
    "missing_err.csv": ("line 8, column 'err': magnitude error is missing", []),
    "too_few_points.csv": ("only 5 usable points; at least 10 needed", []),
    "zero_span.csv": ("zero time span", []),
    "duplicate_times.csv": ("duplicate time", ["--duplicates", "error"]),
    "fluxes_as_mags.csv": ("outside -5..35", []),
    "wrong_delimiter.csv": ("line 2: expected 3 fields as in the header, found 1 (wrong delimiter?)", []),
    "ragged.tsv": ("line 8: expected 3 fields", []),
    "bad_iso_time.csv": ("line 8, column 'date': '2024-13-45T99:00:00' is not a valid iso time", []),
    "bad_phase_angle.csv": ("line 5, column 'phase': phase angle must lie in 0..180 deg", []),
    "zero_distance.csv": ("line 4, column 'delta': distance must be a positive number", []),
    "negative_flux.csv": ("no usable points (12 non-positive flux)", []),
    "unknown_time_format.csv": ("cannot tell whether times are JD or MJD", []),
    "truncated.csv.gz": ("truncated or corrupt gzip data", []),
    "not_gzip.csv.gz": ("not gzip-compressed", []),
    "binary_garbage.csv": ("binary data", []),
    "latin1.csv": ("not UTF-8 text", []),
    "truncated.fits": ("unreadable FITS", []),
}


def test_corpus_is_complete():
    # at least 15 malformed files, and every file in the folder is listed here
    files = {p.name for p in BAD_DIR.iterdir() if p.suffix != ".py"}
    assert len(files) >= 15
    assert files == set(BAD_FILES)


@pytest.mark.parametrize("name", sorted(BAD_FILES))
def test_bad_file_one_line_exit_2(name, capsys):
    problem, extra = BAD_FILES[name]
    path = BAD_DIR / name
    code = main(["inspect", str(path), *extra])
    out, err = capsys.readouterr()
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert str(path) in lines[0]
    assert problem in lines[0]
    assert "Traceback" not in err and out == ""


def test_missing_file(capsys, tmp_path):
    code = main(["inspect", str(tmp_path / "nope.csv")])
    err = capsys.readouterr().err
    assert code == 2 and "nope.csv: no such file" in err and len(err.strip().splitlines()) == 1


def test_bad_file_in_a_subprocess_has_no_traceback():
    # the installed entry point behaves as main() does
    proc = subprocess.run([sys.executable, "-m", "tumble", "inspect", str(BAD_DIR / "nan_time.csv")],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr and len(proc.stderr.strip().splitlines()) == 1


def test_inspect_gault_json(gault_csv, capsys):
    assert main(["inspect", str(gault_csv), "--json"]) == 0
    s = loads_strict(capsys.readouterr().out)
    assert s["n_points"] == 65 and s["bands"] == {"g": 24, "r": 41}
    assert s["time_format"] == "mjd" and s["light_time"].startswith("corrected")


def test_inspect_text_and_write(gault_csv, capsys, tmp_path):
    out = tmp_path / "norm.ecsv"
    assert main(["inspect", str(gault_csv), "--write", str(out)]) == 0
    text = capsys.readouterr().out
    assert "65 kept of 65 read" in text and "phase angle" in text
    assert main(["inspect", str(out), "--json"]) == 0
    again = loads_strict(capsys.readouterr().out)
    assert again["n_points"] == 65


def test_usage_error_exit_2(capsys):
    assert main(["inspect"]) == 2
    assert main(["inspect", "x.csv", "--time-scale", "gps"]) == 2
    assert main([]) == 2


def test_version_and_help(capsys):
    from tumble import __version__

    assert main(["--version"]) == 0
    assert __version__ in capsys.readouterr().out
    assert main(["--help"]) == 0
    assert "inspect" in capsys.readouterr().out


def test_cli_import_is_light():
    # `tumble --help` must not pay for the science stack: importing the CLI and
    # building its parser must not import numpy, astropy, scipy or emcee.
    code = ("import sys; from tumble.cli import build_parser; build_parser(); "
            "print(sorted(m for m in ('numpy', 'astropy', 'scipy', 'emcee', 'matplotlib') if m in sys.modules))")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert proc.stdout.strip() == "[]"
