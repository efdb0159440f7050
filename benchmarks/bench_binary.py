"""The binary family against tumbling: simulated binaries with mutual events and simulated tumblers.

Run:  .venv/bin/python benchmarks/bench_binary.py [--quick] [--n 6] [--seed 1]

Binaries: a PA triaxial primary (P1 2-5 h) with a spherical satellite (R2/R1 0.2-0.5, orbit 2.5-4
primary radii, P_orb 10-40 h) on a nearly edge-on orbit (pole within 10 deg of the normal to the mean
Sun and observer directions, so that mutual events occur), dense campaigns, 0.01 mag noise
(tumble.simulate with ``binary=``). Tumblers: SAM and LAM ellipsoids drawn as in bench_classify.py.
For each object the evidence (PA, NPA) and the binary family are computed on the same frozen problem and
the decision is made with and without the binary family (no physical fit: the verdict from the evidence).

Printed: binaries called NPA without / with the binary family; binaries with events >= 3x the noise
named as binaries (the binary rule fires) with P_orb within 1 %; tumblers for which the binary rule fires;
and the time of the binary family against the time of the PA/NPA evidence, measured side by side.
Scientific estimates for research use: a handful of objects, not a calibration.
"""

from __future__ import annotations

import os

for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_v] = "1"

import argparse  # noqa: E402
import math  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402

from tumble.classify.binary import binary_evidence  # noqa: E402
from tumble.classify.evidence import fourier_evidence_with_problem  # noqa: E402
from tumble.classify.rules import decide  # noqa: E402
from tumble.dynamics import RotationState  # noqa: E402
from tumble.mutual_events import BinaryOrbit  # noqa: E402
from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve  # noqa: E402

warnings.simplefilter("ignore")

START = 2461000.5
NOISE_MAG = 0.01
BINARY_REASON = "a binary with mutual events"


def _inertia(axes):
    a2, b2, c2 = np.asarray(axes, float) ** 2
    return (b2 + c2) / (a2 + b2), (a2 + c2) / (a2 + b2)


def _plan(quick):
    if quick:
        return DenseCampaign(START, n_nights=5, hours_per_night=7, cadence_min=10, zero_point_sigma_mag=0.02)
    return DenseCampaign(START, n_nights=8, hours_per_night=7, cadence_min=6, zero_point_sigma_mag=0.02)


def _axes(rng):
    ab, bc = rng.uniform(1.15, 1.6), rng.uniform(1.05, 1.3)
    return np.array([ab * bc, bc, 1.0])


def make_binary(rng, plan):
    axes = _axes(rng)
    state = RotationState.principal_axis(rng.uniform(2.0, 5.0), rng.uniform(0, 360), rng.uniform(-60, 60),
                                         rng.uniform(0, 360), START)
    probe = simulate_lightcurve(state, axes, DenseCampaign(START, n_nights=1), noise=NoiseModel(0.0), rng=0)
    o, s = probe.lightcurve.obs_dir.mean(axis=0), probe.lightcurve.sun_dir.mean(axis=0)
    pole = np.cross(o, s)
    pole /= np.linalg.norm(pole)
    lon, lat = math.degrees(math.atan2(pole[1], pole[0])), math.degrees(math.asin(pole[2]))
    orbit = BinaryOrbit(rng.uniform(10.0, 40.0), rng.uniform(0.2, 0.5), rng.uniform(2.5, 4.0), lon,
                        float(np.clip(lat + rng.uniform(-10, 10), -90, 90)), rng.uniform(0, 360), START)
    seed = int(rng.integers(1 << 30))
    with_events = simulate_lightcurve(state, axes, plan, noise=NoiseModel(NOISE_MAG), rng=seed, binary=orbit)
    without = simulate_lightcurve(state, axes, plan, noise=NoiseModel(NOISE_MAG), rng=seed)
    diff = with_events.model_mag - without.model_mag
    return with_events.lightcurve, dict(kind="binary", p_orb_h=orbit.p_orb_h, depth_mag=float(np.ptp(diff)))


def make_tumbler(rng, plan, mode):
    axes = _axes(rng)
    i1, i2 = _inertia(axes)
    u = rng.uniform(0.25, 0.85)
    idd = 1.0 - u * (1.0 - i2) if mode == "SAM" else i1 + u * (i2 - i1)
    state = RotationState.excited(i1, i2, idd, rng.uniform(15.0, 50.0), rng.uniform(0, 360), rng.uniform(-60, 60),
                                  rng.uniform(0, 360), rng.uniform(0, 360), START)
    sim = simulate_lightcurve(state, axes, plan, noise=NoiseModel(NOISE_MAG), rng=int(rng.integers(1 << 30)))
    return sim.lightcurve, dict(kind=mode, p_orb_h=math.nan, depth_mag=math.nan)


def run_one(lc, info):
    t0 = time.perf_counter()
    problem, ev = fourier_evidence_with_problem(lc)
    t1 = time.perf_counter()
    b = binary_evidence(problem, ev)
    t2 = time.perf_counter()
    before = decide(ev, span_d=lc.span_d)
    after = decide(ev, span_d=lc.span_d, binary=b)
    named = BINARY_REASON in after.grade_reason
    return dict(info, before=before.rotation, after=after.rotation, named=named, p_orb_found_h=b.p_orb_h,
                dln_bin_npa=b.ln_z_binary - ev.ln_z_npa, dln_bin_pa=b.ln_z_binary - ev.ln_z_pa,
                t_evidence_s=t1 - t0, t_binary_s=t2 - t1)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="3 binaries and 2 tumblers on shorter campaigns")
    ap.add_argument("--n", type=int, default=6, help="binaries (and as many tumblers) in the full run")
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    plan = _plan(args.quick)
    n_bin, n_tum = (3, 2) if args.quick else (args.n, args.n)
    rows = []
    for i in range(n_bin):
        rows.append(run_one(*make_binary(rng, plan)))
        r = rows[-1]
        print(f"binary  P_orb {r['p_orb_h']:6.2f} h depth {r['depth_mag']:.3f} mag -> before {r['before']:9s} "
              f"after {r['after']:9s} named {r['named']!s:5s} P_orb found {r['p_orb_found_h']:8.3f} h "
              f"lnZ_bin-lnZ_npa {r['dln_bin_npa']:8.1f}  [{r['t_evidence_s']:.1f} s + {r['t_binary_s']:.1f} s]",
              flush=True)
    for i in range(n_tum):
        rows.append(run_one(*make_tumbler(rng, plan, "SAM" if i % 2 == 0 else "LAM")))
        r = rows[-1]
        print(f"{r['kind']:7s} -> before {r['before']:9s} after {r['after']:9s} named {r['named']!s:5s} "
              f"lnZ_bin-lnZ_npa {r['dln_bin_npa']:8.1f}  [{r['t_evidence_s']:.1f} s + {r['t_binary_s']:.1f} s]",
              flush=True)
    bins = [r for r in rows if r["kind"] == "binary"]
    tums = [r for r in rows if r["kind"] != "binary"]
    strong = [r for r in bins if r["depth_mag"] >= 3 * NOISE_MAG]
    good = [r for r in strong if r["named"] and abs(r["p_orb_found_h"] / r["p_orb_h"] - 1) < 0.01]
    print(f"binaries called NPA: without the binary family {sum(r['before'] == 'NPA' for r in bins)}/{len(bins)}, "
          f"with it {sum(r['after'] == 'NPA' for r in bins)}/{len(bins)}")
    print(f"binaries with events >= 3x noise named binary with P_orb within 1 %: {len(good)}/{len(strong)}")
    print(f"tumblers for which the binary alternative is named: {sum(r['named'] for r in tums)}/{len(tums)}; "
          f"called NPA {sum(r['after'] == 'NPA' for r in tums)}/{len(tums)} (before {sum(r['before'] == 'NPA' for r in tums)})")
    te, tb = sum(r["t_evidence_s"] for r in rows), sum(r["t_binary_s"] for r in rows)
    print(f"time: binary family / PA-NPA evidence = {tb / te:.2f} ({tb:.1f} s / {te:.1f} s over {len(rows)} objects)")


if __name__ == "__main__":
    main()
