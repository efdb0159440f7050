"""The demo run behind `make demo`: tumble on the invented demo catalogue.

Classifies every campaign object with ``tumble survey`` (files grouped by
the name before ``__``) and compares the verdicts with the truth table, reads
the sparse survey table and triages it with ``tumble survey --screen`` (compared
with the truth table too), runs the full sparse route (the geometry-aware PA fit
with the survey's orbital elements, ``--orbits``) on the first
:data:`SPARSE_FULL_SUBSET` survey objects, inspects one object, constrains the rigidity
from the census of earlier verdicts, and makes the HTML report of the
campaign with ``tumble report``, printing what a user would see from the
command line. Output goes to ``demo_out/`` (the report to ``demo_out/report/``).
"""

from __future__ import annotations

import shutil
import sys
from collections import defaultdict
from pathlib import Path

HERE = Path(__file__).resolve().parent
OUT = HERE.parent / "demo_out"
#: Survey objects (the first of the table, in order) that get the full sparse route: tens of seconds
#: each on a free core (minutes on a loaded one), so the whole sample (240) would take hours and the
#: demo runs a few; the screen triages all of them.
SPARSE_FULL_SUBSET = 4
#: Worker processes of the demo's full sparse route.
SPARSE_WORKERS = 2


def campaign_groups() -> dict[str, list[Path]]:
    groups: dict[str, list[Path]] = defaultdict(list)
    for path in sorted((HERE / "campaign").iterdir()):
        if path.name.startswith("."):
            continue
        groups[path.name.split("__")[0]].append(path)
    return dict(groups)


def _truth_and_results(results_path: Path) -> tuple:
    """The demo's truth table by object, and a results catalogue."""
    from astropy.table import Table

    return {str(r["object"]): r for r in Table.read(HERE / "truth.ecsv")}, Table.read(results_path)


def _truth_label(t) -> str:
    """'PA' or 'NPA/<mode>' of a truth row."""
    return "PA" if t["rotation"] == "PA" else f"NPA/{t['mode']}"


def accuracy_against_truth(results_path: Path) -> None:
    """Compare the survey's verdicts with the truth table the demo was generated from."""
    truth, res = _truth_and_results(results_path)
    print(f"{'object':10s} {'truth':>10s} {'verdict':>10s} {'grade':>9s}  periods (h): truth | found")
    n_ok = n_right = 0
    for r in res:
        name = str(r["object"])
        t = truth[name]
        true_label = _truth_label(t)
        if r["status"] != "ok":
            print(f"{name:10s} {true_label:>10s} {'error':>10s}")
            continue
        found = r["rotation"] if r["rotation"] != "NPA" else f"NPA/{r['mode']}"
        n_ok += 1
        n_right += r["rotation"] == t["rotation"]
        tp = f"{t['period_h']:.4g}" if t["rotation"] == "PA" else f"{t['p_psi_h']:.4g}, {t['p_phi_h']:.4g}"
        fp = (f"{r['period_h']:.4g}" if r["rotation"] == "PA"
              else f"{r['p_psi_h']:.4g}, {r['p_phi_h']:.4g}" if r["rotation"] == "NPA" else "-")
        print(f"{name:10s} {true_label:>10s} {found:>10s} {str(r['grade']):>9s}  {tp} | {fp}")
    print(f"demo accuracy: {n_right} of {n_ok} classified objects have the true rotation class "
          f"(undecided counts as not right)")


def screen_against_truth(results_path: Path) -> None:
    """Confusion table of the sparse screen against the truth table."""
    from astropy.table import Table

    truth = {str(r["object"]): str(r["rotation"]) for r in Table.read(HERE / "truth.ecsv")}
    res = Table.read(results_path)
    table = defaultdict(int)
    for r in res:
        found = str(r["screen_flag"]) if r["status"] == "ok" else "error"
        table[(truth[str(r["object"])], found)] += 1
    cols = ("quiet", "candidate", "unknown", "error")
    print(f"{'truth':10s}" + "".join(f"{c:>11s}" for c in cols))
    for t in ("PA", "NPA"):
        print(f"{t:10s}" + "".join(f"{table[(t, c)]:11d}" for c in cols))
    n_pa = sum(table[("PA", c)] for c in cols)
    n_npa = sum(table[("NPA", c)] for c in cols)
    print(f"screen: {table[('PA', 'candidate')]} of {n_pa} PA objects flagged as candidates; "
          f"{table[('NPA', 'candidate')]} of {n_npa} NPA objects flagged (a triage for follow-up, not a verdict)")


def write_sparse_subset(path: Path, n: int) -> list[str]:
    """The first ``n`` objects of the survey table, written as a CSV of their own; their names."""
    import gzip

    lines = gzip.decompress((HERE / "sparse" / "svs_sample.csv.gz").read_bytes()).decode().splitlines()
    header = [ln for ln in lines if ln.startswith("#")]
    body = [ln for ln in lines if not ln.startswith("#")]
    names: list[str] = []
    rows = [body[0]]
    for ln in body[1:]:
        name = ln.split(",", 1)[0]
        if name not in names:
            if len(names) == n:
                break
            names.append(name)
        rows.append(ln)
    path.write_text("\n".join(header + [f"# the first {n} objects of sparse/svs_sample.csv.gz"] + rows) + "\n")
    return names


def sparse_route_against_truth(results_path: Path) -> None:
    """The full sparse route's verdicts against the truth: periods recovered, alias families, undecided."""
    truth, res = _truth_and_results(results_path)
    print(f"{'object':10s} {'truth':>8s} {'verdict':>10s} {'grade':>9s} {'P true h':>9s} {'P found h':>10s}  reason")
    n_pa = n_found = n_wrong = n_alias = n_undecided = n_npa_called = 0
    for r in res:
        name = str(r["object"])
        t = truth[name]
        true_label = _truth_label(t)
        if r["status"] != "ok":
            print(f"{name:10s} {true_label:>8s} {'error':>10s}  {r['message']}")
            continue
        p_true = float(t["period_h"]) if t["rotation"] == "PA" else float("nan")
        p_found = float(r["period_h"]) if r["rotation"] == "PA" else float("nan")
        # the results catalogue carries the verdict's reasons in its message column
        reason = str(r["message"]) if r["rotation"] == "undecided" else ""
        if len(reason) > 70:
            reason = reason[:67] + "..."
        if t["rotation"] == "PA":
            n_pa += 1
            if r["rotation"] == "PA":
                ok = abs(p_found - p_true) <= 0.01 * p_true
                n_found += ok
                n_wrong += not ok
        n_undecided += r["rotation"] == "undecided"
        n_alias += r["rotation"] == "undecided" and "sidereal periods fit within" in str(r["message"])
        n_npa_called += r["rotation"] == "NPA"
        pt = f"{p_true:.4f}" if p_true == p_true else "-"
        pf = f"{p_found:.4f}" if p_found == p_found else "-"
        print(f"{name:10s} {true_label:>8s} {str(r['rotation']):>10s} {str(r['grade']):>9s} {pt:>9s} {pf:>10s}  {reason}")
    print(f"sparse route: {n_found} of {n_pa} PA objects with the sidereal period within 1 % ({n_wrong} PA verdicts "
          f"with another period); {n_undecided} undecided, {n_alias} of them with an alias family of several "
          f"sidereal periods; {n_npa_called} NPA verdicts")


def main() -> int:
    from tumble.cli import main as tumble
    from tumble.exceptions import PhotometryError
    from tumble.photometry import iter_survey

    OUT.mkdir(exist_ok=True)
    results = OUT / "campaign_results.ecsv"
    objects, report = OUT / "objects", OUT / "report"
    for stale in (results, results.with_name(results.name + ".journal.jsonl")):
        stale.unlink(missing_ok=True)
    for stale_dir in (objects, report):
        shutil.rmtree(stale_dir, ignore_errors=True)
    print("== Kestrel Ridge Network follow-up campaign (invented): tumble survey ==")
    code = tumble(["survey", str(HERE / "campaign"), "--out", str(results), "--seed", "1", "--quiet",
                   "--keep-objects", str(objects)])
    if code != 0:
        return code
    print("\n== How the demo did against its truth table ==")
    accuracy_against_truth(results)

    print("\n== Sparrowhawk Valley Survey sample (invented, sparse): reading ==")
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
    print("\n== The sparse sample: tumble survey --screen (fast triage) ==")
    sparse_results = OUT / "sparse_screen.ecsv"
    for stale in (sparse_results, sparse_results.with_name(sparse_results.name + ".journal.jsonl")):
        stale.unlink(missing_ok=True)
    code = tumble(["survey", str(HERE / "sparse" / "svs_sample.csv.gz"), "--screen", "--out", str(sparse_results),
                   "--seed", "1", "--quiet"])
    if code != 0:
        return code
    screen_against_truth(sparse_results)

    print(f"\n== The sparse route on the first {SPARSE_FULL_SUBSET} survey objects: tumble survey --orbits ==")
    print("(the geometry-aware PA fit needs the Sun and observer directions: from the survey's orbital elements)")
    subset = OUT / "svs_subset.csv"
    write_sparse_subset(subset, SPARSE_FULL_SUBSET)
    full_results = OUT / "sparse_full.ecsv"
    for stale in (full_results, full_results.with_name(full_results.name + ".journal.jsonl")):
        stale.unlink(missing_ok=True)
    code = tumble(["survey", str(subset), "--orbits", str(HERE / "sparse" / "svs_orbits.csv"), "--out",
                   str(full_results), "--seed", "1", "--quiet", "--workers", str(SPARSE_WORKERS)])
    if code != 0:
        return code
    sparse_route_against_truth(full_results)

    print("\n== One object in full: tumble inspect ==")
    code = tumble(["inspect", *map(str, campaign_groups()["KRN-003"]), "--write", str(OUT / "KRN-003.ecsv")])
    if code != 0:
        return code

    print("== Rigidity from the census of earlier verdicts: tumble relax --sample ==")
    code = tumble(["relax", "--sample", str(HERE / "census" / "krn_census.ecsv"), "--quiet", "--seed", "1"])
    print("\n(the census was generated with log10 muQ = 11.3 Pa; see catalogs_demo/README.md)")
    if code != 0:
        return code

    print("\n== The campaign's HTML report: tumble report ==")
    # sizes for the period-diameter diagram: the catalogue's diameters (from H and albedo)
    code = tumble(["report", str(results), "--out", str(report), "--objects", str(objects),
                   "--data", str(HERE / "campaign"), "--sizes", str(HERE / "truth.ecsv"), "--quiet"])
    if code != 0:
        return code
    print(f"\noutputs in {OUT}")
    print(f"open the report: {(report / 'index.html').resolve().as_uri()}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
