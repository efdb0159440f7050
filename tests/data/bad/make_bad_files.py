"""Regenerate the malformed-input corpus in this folder (run from anywhere).

Each file breaks the reader in exactly one way; tests/test_cli_inspect.py says
which problem each must report. The files are committed; this script documents
how they were made.
"""

import gzip
from pathlib import Path

HERE = Path(__file__).parent


def rows(n=12, t0=2460100.5, step=0.01, mag="15.{i:03d}", err="0.02"):
    return "".join(f"{t0 + i * step:.5f},{mag.format(i=i)},{err}\n" for i in range(n))


FILES = {
    "empty.csv": "",
    "header_only.csv": "jd,mag,err\n",
    "comments_only.txt": "# nothing here\n# but comments\n",
    "no_time_column.csv": "when,mag,err\n" + "".join(f"{i},15.0,0.02\n" for i in range(12)),
    "no_mag_column.csv": "jd,brightness,err\n" + rows(),
    "no_err_column.csv": "jd,mag\n" + "".join(f"{2460100.5 + i * 0.01:.5f},15.0\n" for i in range(12)),
    "non_numeric_mag.csv": "jd,mag,err\n" + rows(5) + "2460100.60000,abc,0.02\n" + rows(6, t0=2460100.7),
    "nan_time.csv": "jd,mag,err\n" + rows(4) + "nan,15.1,0.02\n" + rows(8, t0=2460100.7),
    "inf_time.csv": "jd,mag,err\n" + rows(4) + "inf,15.1,0.02\n" + rows(8, t0=2460100.7),
    "negative_err.csv": "jd,mag,err\n" + rows(6) + "2460100.60000,15.2,-0.01\n" + rows(6, t0=2460100.7),
    "missing_err.csv": "jd,mag,err\n" + rows(6) + "2460100.60000,15.2,\n" + rows(6, t0=2460100.7),
    "too_few_points.csv": "jd,mag,err\n" + rows(5),
    "zero_span.csv": "jd,mag,err,filter\n"
    + "".join(f"2460100.50000,15.{i:02d},0.02,{b}\n" for i, b in enumerate("BVRIUZYJHKLM")),
    "duplicate_times.csv": "jd,mag,err\n" + rows(8) + rows(4),
    "fluxes_as_mags.csv": "jd,mag,err\n" + rows(12, mag="1234{i:02d}.5", err="30.0"),
    "wrong_delimiter.csv": "jd,mag,err\n" + rows(12).replace(",", ";"),
    "ragged.tsv": "jd\tmag\terr\n" + rows(6).replace(",", "\t") + "2460100.7\t15.1\t0.02\t99\n",
    "bad_iso_time.csv": "date,mag,err\n"
    + "".join(f"2024-03-{i + 1:02d}T01:00:00,15.0,0.02\n" for i in range(6))
    + "2024-13-45T99:00:00,15.0,0.02\n"
    + "".join(f"2024-03-{i + 10:02d}T01:00:00,15.0,0.02\n" for i in range(6)),
    "bad_phase_angle.csv": "jd,mag,err,phase\n"
    + "".join(f"{2460100.5 + i * 0.01:.5f},15.0,0.02,{250 if i == 3 else 20}\n" for i in range(12)),
    "zero_distance.csv": "jd,mag,err,r,delta\n"
    + "".join(f"{2460100.5 + i * 0.01:.5f},15.0,0.02,1.2,{0 if i == 2 else 0.3}\n" for i in range(12)),
    "negative_flux.csv": "jd,flux,flux_err\n" + "".join(f"{2460100.5 + i * 0.01:.5f},-{i + 1}.0,0.1\n" for i in range(12)),
    "unknown_time_format.csv": "time,mag,err\n" + "".join(f"{i * 0.01:.5f},15.0,0.02\n" for i in range(12)),
}


def main():
    for name, text in FILES.items():
        (HERE / name).write_text(text, encoding="utf-8")
    good = ("jd,mag,err\n" + rows()).encode()
    (HERE / "truncated.csv.gz").write_bytes(gzip.compress(good, mtime=0)[:40])
    (HERE / "not_gzip.csv.gz").write_bytes(good)
    (HERE / "binary_garbage.csv").write_bytes(bytes(range(256)) * 8)
    (HERE / "latin1.csv").write_bytes("jd,mag,err,observer\n".encode() + b"2460100.5,15.0,0.02,J\xf6rg\n" * 12)
    fits_header = b"SIMPLE  =                    T / truncated FITS".ljust(80) + b"BITPIX  =                    8".ljust(80)
    (HERE / "truncated.fits").write_bytes(fits_header)


if __name__ == "__main__":
    main()
