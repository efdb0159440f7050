"""Benchmark of the linear screens of the tumbling-solution search (``tumble.classify.solutions``).

The search enumerates candidate ``(f_psi, f_phi)`` pairs from the evidence's lattices, ranks them by
cheap linear screens and fits only the best :data:`tumble.classify.solutions.N_SCREENED` of each
screen with the physical model. A true pair ranked below that is never fitted, whatever the fit
could do. This benchmark measures exactly that, on

- the Apophis-like SAM of ``tests/test_classify_solutions.py`` (same construction: Pravec et al.
  2014 periods, Lee et al. 2022 inertia and angular momentum, 40 dense nights), and
- the demo's KRN-007 (SAM 86 h / 19.2 h; always searched, as in ``bench_solutions.py``), and
- the held-out dense tumblers of the calibration library that the evidence route detects (the same
  objects, order and truth as ``benchmarks/bench_solutions.py``, whose helpers are imported),

and prints for each object and each screen variant (side by side in one run): the rank of the true
pair under each screen (0 = best), its rank in the interleaved union the search fits
(:func:`~tumble.classify.solutions.union_by_rank`), whether it is fitted at all and with the wide
budget, the number of pairs fitted, and the screening time. The "true pair" is the enumerated pair
nearest to the true frequencies (largest of the two offsets, in cycles per span); it counts only
within :data:`TRUE_PAIR_CYCLES` (the physical fit's own basin is about that wide).

Variants (``--variants``, registry :data:`VARIANTS`): ``old`` are the term sets and pair budget of main
before this benchmark (4b98740), kept here literally as the baseline; ``new`` are the package's current
screens and budget.

Usage::

    nice .venv/bin/python benchmarks/bench_screens.py --quick          # Apophis-like, KRN-007, 4 detected tumblers
    nice .venv/bin/python benchmarks/bench_screens.py --limit 40       # ... and the first 40 held-out dense tumblers
    nice .venv/bin/python benchmarks/bench_screens.py --apophis-only
    nice .venv/bin/python benchmarks/bench_screens.py --content        # the measurement behind the screens' terms

``--content`` fits the two-dimensional Fourier series (Kaasalainen 2001) at the true frequencies to
noise-free simulated SAM and LAM ellipsoids (:data:`CONTENT_INERTIA` x :data:`CONTENT_EXCITATION` x
:data:`CONTENT_DIRECTIONS_DEG`) and prints which terms carry the power: the terms of
``SAM_SCREEN_TERMS`` and ``LAM_SCREEN_TERMS`` are its output.

The evidence route (the slow part, ~10 s per object) is cached per object as JSON in ``--cache``
(written atomically); the screens themselves take seconds. The library is read from ``--library``
(read only). Threads: set ``OPENBLAS_NUM_THREADS=1``. Figures are for simulated light curves only.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from dataclasses import dataclass  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_solutions import DEFAULT_LIBRARY, DEMO_OBJECT, SEED, demo_object, library_objects  # noqa: E402

#: Evidence records cached here (one JSON per object).
DEFAULT_CACHE = HERE / ".cache" / "screens-evidence"
#: Objects of --quick (detected held-out tumblers, besides the Apophis-like case).
QUICK_DETECTED = 4
#: Held-out dense tumblers looked at by default (bench_solutions.py's sample of the last stop).
DEFAULT_LIMIT = 40
#: A pair further than this from the truth (cycles per span, in f_psi or f_phi) is not the true pair:
#: the solutions of the search are told apart at 0.25 cycles (``SAME_SOLUTION_CYCLES``).
TRUE_PAIR_CYCLES = 0.25
#: The Apophis-like case of tests/test_classify_solutions.py: Pravec et al. 2014 (Icarus 233, 48)
#: P_psi 263 h, P_phi 27.38 h, SAM; inertia 0.64 : 0.97 : 1 and L at (275, -85) deg of Lee et al.
#: 2022 (A&A 661, L3); 40 nights of 6 h at 30 min, 0.02 mag nightly zero points, 0.01 mag noise.
APOPHIS_ID = "apophis-like"
APOPHIS = {"mode": "SAM", "p_psi_h": 263.0, "p_phi_h": 27.38}
#: --content: simulated ellipsoids (noise-free, Lommel-Seeliger, every 15 min over 40 days from the
#: simulator's default orbit) of each NPA mode: inertia ratios (I1/I3, I2/I3), excitation (the
#: share of the mode's I_d/I3 range from its lower end), angular-momentum directions (lon, lat deg).
CONTENT_INERTIA = ((0.4, 0.8), (0.5, 0.97), (0.6, 0.9), (0.64, 0.97), (0.8, 0.97), (0.5, 0.6), (0.45, 0.7), (0.7, 0.8))
CONTENT_EXCITATION = (0.3, 0.7)
CONTENT_DIRECTIONS_DEG = ((275.0, -85.0), (40.0, 30.0), (120.0, 0.0))
#: P_psi of the content states, hours (P_phi follows from the inertia and excitation).
CONTENT_P_PSI_H = 100.0
CONTENT_SPAN_D, CONTENT_STEP_D = 40.0, 0.25 / 24.0
#: Terms fitted: |n_phi| <= 4, |n_psi| <= 8; a term within 1/span of zero or of a lower-order term is left out.
CONTENT_MAX_N_PHI, CONTENT_MAX_N_PSI = 4, 8
#: A term is kept for a mode's screen when among the CONTENT_TOP strongest in at least this share of its states.
CONTENT_TOP = 8
CONTENT_MIN_SHARE = 0.25
#: The term sets (n_phi, n_psi) of main at 4b98740: the baseline of the comparison.
OLD_TERM_SETS = (
    ((0, 1), (0, 2), (1, -2), (1, -1), (1, 0), (1, 1), (1, 2), (2, -2), (2, -1), (2, 0), (2, 1), (2, 2)),
    ((0, 2), (0, 4)) + tuple((a, b) for a in (1, 2, 3, 4) for b in (-4, -2, 0, 2, 4)),
)


@dataclass(frozen=True)
class CachedEvidence:
    """What the search reads of the evidence (:func:`tumble.classify.solutions.candidate_lattices`)."""

    f1_npa_per_d: float
    f2_per_d: float
    npa_pairs: tuple


@dataclass(frozen=True)
class Case:
    """One light curve with its evidence and truth."""

    object_id: str
    lc: object
    evidence: CachedEvidence
    truth: dict
    rotation: str


@dataclass(frozen=True)
class VariantResult:
    """The true pair's ranks under one screen variant."""

    ranks: tuple
    union_rank: int
    n_fitted: int
    n_wide: int
    seconds: float


def apophis_lightcurve():
    """The Apophis-like SAM light curve, built exactly as the test builds it."""
    from tumble.brightness import axes_from_inertia_ratios
    from tumble.dynamics import RotationState
    from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve

    st = RotationState.from_periods(0.64, 0.97, APOPHIS["p_psi_h"], APOPHIS["p_phi_h"], "SAM", l_lon_deg=275.0,
                                    l_lat_deg=-85.0)
    plan = DenseCampaign(2460000.5, n_nights=40, hours_per_night=6.0, cadence_min=30.0, zero_point_sigma_mag=0.02)
    return simulate_lightcurve(st, axes_from_inertia_ratios(0.64, 0.97), plan, noise=NoiseModel(0.01),
                               rng=11).lightcurve


def evidence_record(object_id, lc, cache: Path, *, apophis: bool) -> dict:
    """The cached evidence of one light curve (computed and cached when missing)."""
    from tumble._io import atomic_write_text

    path = cache / f"{object_id}.json"
    if path.exists():
        return json.loads(path.read_text())
    if apophis:
        # the test's own route: the evidence alone, always searched
        from tumble.classify.evidence import fourier_evidence_with_problem

        _, ev = fourier_evidence_with_problem(lc)
        rotation = "NPA"
    else:
        # bench_solutions.py's route: detected = the evidence route's verdict is NPA
        from tumble.classify import classify

        cls = classify(lc, rng=SEED, fit_state=False, detection_limit=False)
        ev, rotation = cls.evidence, cls.verdict.rotation
    rec = {"object_id": object_id, "rotation": rotation, "f1_npa_per_d": float(ev.f1_npa_per_d),
           "f2_per_d": float(ev.f2_per_d), "npa_pairs": [[float(a), float(b)] for a, b in ev.npa_pairs]}
    cache.mkdir(parents=True, exist_ok=True)
    atomic_write_text(path, json.dumps(rec))
    return rec


def to_case(object_id, lc, truth, rec) -> Case:
    ev = CachedEvidence(rec["f1_npa_per_d"], rec["f2_per_d"], tuple(tuple(p) for p in rec["npa_pairs"]))
    return Case(object_id, lc, ev, truth, rec["rotation"])


def cases(args):
    """The Apophis-like case, then the detected held-out dense tumblers (up to the limit)."""
    cache = Path(args.cache)
    lc = apophis_lightcurve()
    yield to_case(APOPHIS_ID, lc, APOPHIS, evidence_record(APOPHIS_ID, lc, cache, apophis=True))
    if args.apophis_only:
        return
    oid, lc, truth = demo_object()
    yield to_case(oid, lc, truth, evidence_record(oid, lc, cache, apophis=False))
    n_detected = 0
    limit = DEFAULT_LIMIT if args.limit is None else args.limit
    for oid, lc, truth in library_objects(Path(args.library), limit):
        rec = evidence_record(oid, lc, cache, apophis=False)
        if rec["rotation"] != "NPA":  # as bench_solutions.py: only detected tumblers are searched
            continue
        yield to_case(oid, lc, truth, rec)
        n_detected += 1
        if args.quick and n_detected >= QUICK_DETECTED:
            return


# -- screen variants: each gives the chi-square of every pair under each of its screens ------------------


def old_chi2(thin, pairs, evidence) -> list:
    """Baseline: the term sets of :data:`OLD_TERM_SETS`, plain series without drift."""
    from tumble.classify.solutions import ScreenTerms, screen_chi2

    return [screen_chi2(thin, pairs, ScreenTerms(f"old-{i}", terms)) for i, terms in enumerate(OLD_TERM_SETS)]


def new_chi2(thin, pairs, evidence) -> list:
    """The package's current screens (:data:`~tumble.classify.solutions.SCREEN_TERM_SETS`), as the search runs them."""
    from tumble.classify.solutions import SCREEN_TERM_SETS, screen_chi2

    return [screen_chi2(thin, pairs, screen, evidence.f1_npa_per_d) for screen in SCREEN_TERM_SETS]


@dataclass(frozen=True)
class Variant:
    """A screen variant: the chi-square of every pair under each of its screens, and its pair budget."""

    chi2: object
    n_screened: int
    n_wide: int


def _current_budget():
    from tumble.classify.solutions import FitBudget

    return FitBudget()


#: Screen variants compared: ``old`` with main's budget at 4b98740 (20 pairs per screen, the best
#: 5 of each wide), ``new`` with the package's current budget (``FitBudget()``).
VARIANTS = {"old": Variant(old_chi2, 20, 5),
            "new": Variant(new_chi2, _current_budget().n_screened, _current_budget().n_wide)}


def true_pair_index(pairs, truth, span_d) -> tuple:
    """``(index, cycles)`` of the enumerated pair nearest to the truth (index -1 beyond the tolerance)."""
    f_psi, f_phi = 24.0 / truth["p_psi_h"], 24.0 / truth["p_phi_h"]
    d = np.array([max(abs(p.f_psi_per_d - f_psi), abs(p.f_phi_per_d - f_phi)) * span_d for p in pairs])
    k = int(np.argmin(d))
    return (k if d[k] <= TRUE_PAIR_CYCLES else -1), float(d[k])


def score_variant(name, case: Case, thin, pairs, k) -> VariantResult:
    """The true pair's rank under each screen of a variant and in the union the search fits."""
    from tumble.classify.solutions import union_by_rank

    variant = VARIANTS[name]
    t0 = time.perf_counter()
    chi2s = variant.chi2(thin, pairs, case.evidence)
    dt = time.perf_counter() - t0
    full = [np.argsort(np.where(np.isfinite(c), c, np.inf), kind="stable") for c in chi2s]
    ranks, union_rank = (), -1
    if k >= 0:
        ranks = tuple(int(np.flatnonzero(o == k)[0]) for o in full)
        union_rank = union_by_rank(full, len(pairs)).index(k)
    n_fitted = len(union_by_rank(full, variant.n_screened))
    n_wide = len(union_by_rank(full, min(variant.n_wide, variant.n_screened)))
    return VariantResult(ranks, union_rank, n_fitted, n_wide, dt)


def run_case(case: Case, variants) -> dict:
    from tumble.classify.rotation import thin_lightcurve
    from tumble.classify.solutions import SCREEN_MAX_POINTS, candidate_lattices, daily_aliasing, frequency_pairs

    pairs = frequency_pairs(case.lc.span_d, candidate_lattices(case.lc, case.evidence), daily_aliasing(case.lc))
    thin = thin_lightcurve(case.lc, SCREEN_MAX_POINTS)
    k, cycles = true_pair_index(pairs, case.truth, case.lc.span_d)
    return {"object_id": case.object_id, "truth": case.truth, "n_pairs": len(pairs), "true_cycles": cycles,
            "enumerated": k >= 0, "variants": {v: score_variant(v, case, thin, pairs, k) for v in variants}}


def format_row(row, variants) -> str:
    t = row["truth"]
    head = (f"{row['object_id']:20s} {t['mode']} {t['p_psi_h']:8.4g}/{t['p_phi_h']:<8.4g} h  pairs {row['n_pairs']:5d}  "
            f"nearest {row['true_cycles']:.3f} cyc")
    if not row["enumerated"]:
        return head + "  true pair not enumerated"
    parts = []
    for v in variants:
        r = row["variants"][v]
        fitted = "wide" if r.union_rank < r.n_wide else "fit" if r.union_rank < r.n_fitted else "NOT"
        parts.append(f"{v}: ranks {'/'.join(str(x) for x in r.ranks)} union {r.union_rank} {fitted} "
                     f"(fits {r.n_fitted}, {r.seconds:.1f} s)")
    return head + "\n    " + "\n    ".join(parts)


def summary(rows, variants) -> str:
    enum = [r for r in rows if r["enumerated"]]
    lines = [f"objects {len(rows)}, true pair enumerated {len(enum)}"]
    for v in variants:
        res = [r["variants"][v] for r in enum]
        fitted = sum(x.union_rank < x.n_fitted for x in res)
        wide = sum(x.union_rank < x.n_wide for x in res)
        n_fit = [r["variants"][v].n_fitted for r in rows]
        secs = [r["variants"][v].seconds for r in rows]
        lines.append(f"{v:>4s}: true pair fitted {fitted}/{len(enum)} (wide budget {wide}/{len(enum)}); "
                     f"median union rank {np.median([x.union_rank for x in res]) if res else math.nan:.0f}; "
                     f"pairs fitted median {np.median(n_fit):.0f} max {np.max(n_fit)}; "
                     f"screen time median {np.median(secs):.1f} s, total {np.sum(secs):.0f} s")
    return "\n".join(lines)


# -- --content: which terms carry the power of simulated tumblers -----------------------------------------


def content_terms(f_psi, f_phi, span_d) -> list:
    """The terms fitted at one state, lowest order first, without those within 1/span of zero or of a lower one."""
    cand = [(a, b) for a in range(CONTENT_MAX_N_PHI + 1) for b in range(-CONTENT_MAX_N_PSI, CONTENT_MAX_N_PSI + 1)
            if a > 0 or b > 0]
    kept = []
    for a, b in sorted(cand, key=lambda q: (abs(q[0]) + abs(q[1]), q)):
        f = abs(a * f_phi + b * f_psi)
        if f >= 1.0 / span_d and all(abs(f - abs(c * f_phi + d * f_psi)) >= 1.0 / span_d for c, d in kept):
            kept.append((a, b))
    return kept


def term_powers(mode, i1, i2, excitation, lon_deg, lat_deg) -> dict:
    """Power share of each term of the 2-D Fourier series (Kaasalainen 2001) of one noise-free simulated state."""
    from tumble.brightness import axes_from_inertia_ratios
    from tumble.classify.solutions import _screen_columns
    from tumble.dynamics import RotationState, periods_unit_momentum
    from tumble.simulate import GivenCadence, NoiseModel, simulate_lightcurve

    i_d = i2 + excitation * (1.0 - i2) if mode == "SAM" else i1 + excitation * (i2 - i1)
    p_psi_unit, p_phi_unit = periods_unit_momentum(i1, i2, i_d)
    p_phi_h = CONTENT_P_PSI_H * p_phi_unit / p_psi_unit
    st = RotationState.from_periods(i1, i2, CONTENT_P_PSI_H, p_phi_h, mode, l_lon_deg=lon_deg, l_lat_deg=lat_deg)
    t = 2460000.5 + np.arange(0.0, CONTENT_SPAN_D, CONTENT_STEP_D)
    lc = simulate_lightcurve(st, axes_from_inertia_ratios(i1, i2), GivenCadence(t), noise=NoiseModel(0.0),
                             rng=1).lightcurve
    f_psi, f_phi = 24.0 / CONTENT_P_PSI_H, 24.0 / p_phi_h
    terms = content_terms(f_psi, f_phi, CONTENT_SPAN_D)
    tt = t - t.mean()
    y = np.asarray(lc.reduced_mag, float)
    x = np.hstack([np.ones((t.size, 1)), (tt / CONTENT_SPAN_D)[:, None], _screen_columns(tt, f_psi, f_phi, terms)])
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)
    power = (coef[2:].reshape(-1, 2) ** 2).sum(axis=1)
    return dict(zip(terms, power / power.sum()))


def fourier_content() -> None:
    """Print, per NPA mode, how often each term is among the strongest and its mean power share."""
    import itertools
    from collections import Counter

    for mode in ("SAM", "LAM"):
        top, share, n = Counter(), Counter(), 0
        for (i1, i2), e, (lon, lat) in itertools.product(CONTENT_INERTIA, CONTENT_EXCITATION, CONTENT_DIRECTIONS_DEG):
            pw = term_powers(mode, i1, i2, e, lon, lat)
            top.update(sorted(pw, key=pw.get, reverse=True)[:CONTENT_TOP])
            share.update(pw)
            n += 1
        kept = [tm for tm, c in top.items() if c >= CONTENT_MIN_SHARE * n]
        kept.sort(key=lambda tm: -share[tm])
        print(f"{mode}: {n} states; among the {CONTENT_TOP} strongest in >= {CONTENT_MIN_SHARE:.0%} of them "
              f"(strongest on average first): {tuple(kept)}")
        print("    " + ", ".join(f"{tm}: top {top[tm]}/{n}, mean share {share[tm] / n:.3f}"
                                 for tm in sorted(top, key=lambda q: -share[q])[:16]), flush=True)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--library", default=str(DEFAULT_LIBRARY), help="rendered library cache (read only)")
    p.add_argument("--cache", default=str(DEFAULT_CACHE), help="evidence records (one JSON per object)")
    p.add_argument("--limit", type=int, default=None, help=f"held-out dense tumblers looked at (default {DEFAULT_LIMIT})")
    p.add_argument("--quick", action="store_true", help=f"the Apophis-like case, {DEMO_OBJECT} and {QUICK_DETECTED} detected tumblers")
    p.add_argument("--apophis-only", action="store_true", help="only the Apophis-like case")
    p.add_argument("--content", action="store_true",
                   help="only print which 2-D Fourier terms carry the power of simulated SAM and LAM ellipsoids")
    p.add_argument("--variants", default="old,new", help=f"screen variants side by side, of {sorted(VARIANTS)}")
    args = p.parse_args(argv)
    variants = [v.strip() for v in args.variants.split(",") if v.strip()]
    bad = [v for v in variants if v not in VARIANTS]
    if bad:
        p.error(f"unknown variant(s) {bad}; known: {sorted(VARIANTS)}")
    warnings.simplefilter("ignore")
    if args.content:
        fourier_content()
        return 0
    rows = []
    for case in cases(args):
        row = run_case(case, variants)
        rows.append(row)
        print(format_row(row, variants), flush=True)
    apo = [r for r in rows if r["object_id"] == APOPHIS_ID]
    demo = [r for r in rows if r["object_id"] == DEMO_OBJECT]
    lib = [r for r in rows if r["object_id"] not in (APOPHIS_ID, DEMO_OBJECT)]
    print("\nApophis-like SAM:\n" + summary(apo, variants))
    if demo:
        print(f"\ndemo {DEMO_OBJECT}:\n" + summary(demo, variants))
    if lib:
        print("\ndetected held-out dense tumblers of the library:\n" + summary(lib, variants))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
