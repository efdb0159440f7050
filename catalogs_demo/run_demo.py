"""The demo run behind `make demo`: tumble on the invented demo catalogue.

Reads every campaign object (files grouped by the name before ``__``), the
sparse survey table and the census of earlier verdicts, and prints what a
user would see from the command line. Output goes to ``demo_out/``.
"""

from __future__ import annotations

import sys
from collections import defaultdict
from pathlib import Path

HERE = Path(__file__).resolve().parent
OUT = HERE.parent / "demo_out"


def campaign_groups() -> dict[str, list[Path]]:
    groups: dict[str, list[Path]] = defaultdict(list)
    for path in sorted((HERE / "campaign").iterdir()):
        if path.name.startswith("."):
            continue
        groups[path.name.split("__")[0]].append(path)
    return dict(groups)


def main() -> int:
    from tumble.cli import main as tumble
    from tumble.exceptions import PhotometryError
    from tumble.photometry import iter_survey, read_lightcurve

    OUT.mkdir(exist_ok=True)
    print("== Kestrel Ridge Network follow-up campaign (invented): reading each object ==")
    print(f"{'object':10s} {'files':>5s} {'points':>6s} {'sessions':>8s} {'span_d':>7s}  phase angle (deg)")
    n_ok = n_err = 0
    for name, files in campaign_groups().items():
        try:
            lc = read_lightcurve(files)
        except PhotometryError as exc:
            n_err += 1
            print(f"{name:10s} {len(files):5d}  error: {exc}")
            continue
        n_ok += 1
        print(f"{name:10s} {len(files):5d} {lc.n_points:6d} {lc.n_sessions:8d} {lc.span_d:7.2f}  "
              f"{lc.phase_deg.min():.1f} .. {lc.phase_deg.max():.1f}")
    print(f"{n_ok} objects read, {n_err} with bad files (deliberately broken, see catalogs_demo/README.md)")

    print("\n== Sparrowhawk Valley Survey sample (invented, sparse) ==")
    counts = defaultdict(int)
    n_points = []
    for _, item in iter_survey(HERE / "sparse" / "svs_sample.csv.gz"):
        if isinstance(item, PhotometryError):
            counts["error"] += 1
        else:
            counts["ok"] += 1
            n_points.append(item.n_points)
    print(f"{counts['ok']} objects read ({counts['error']} errors); "
          f"{min(n_points)}-{max(n_points)} points each, all sparse (one zero-point per band)")

    print("\n== One object in full: tumble inspect ==")
    first = campaign_groups()["KRN-003"]
    code = tumble(["inspect", *map(str, first), "--write", str(OUT / "KRN-003.ecsv")])
    if code != 0:
        return code

    print("== Rigidity from the census of earlier verdicts: tumble relax --sample ==")
    code = tumble(["relax", "--sample", str(HERE / "census" / "krn_census.ecsv"), "--quiet", "--seed", "1"])
    print(f"\n(the census was generated with log10 muQ = 11.3 Pa; see catalogs_demo/truth.ecsv metadata)")
    print(f"outputs in {OUT}")
    return code


if __name__ == "__main__":
    sys.exit(main())
