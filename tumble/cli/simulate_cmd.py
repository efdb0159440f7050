"""``tumble simulate``: write a synthetic light curve of a rotating ellipsoid, with its truth."""

from __future__ import annotations

import argparse

from tumble.laws import DEFAULT_LAMBERT_WEIGHT, LAWS
from tumble.cli._common import parse_elements, parse_observatory, print_json

DEFAULT_START_JD_UTC = 2461000.5  # 2025-11-21 00:00 UTC


def _pair(text: str, what: str, n: int = 2):
    from tumble.simulate import SimulationError

    parts = [p.strip() for p in str(text).split(",")]
    if len(parts) != n:
        raise SimulationError(f"--{what}: expected {n} comma-separated numbers, got '{text}'")
    try:
        return [float(p) for p in parts]
    except ValueError:
        raise SimulationError(f"--{what}: '{text}' holds something that is not a number") from None


def add_parser(sub) -> None:
    p = sub.add_parser(
        "simulate",
        help="write a synthetic light curve (PA, SAM or LAM) with its truth",
        description="Simulate the light curve of a triaxial ellipsoid in free rotation (principal-axis, "
                    "short-axis or long-axis mode) observed in a dense campaign or a sparse survey, with "
                    "the Sun-asteroid-observer geometry of a two-body orbit, and write it in any format "
                    "the reader reads. The truth goes into <OUT>.truth.json (and the ECSV metadata).",
    )
    p.add_argument("-o", "--out", required=True, metavar="FILE",
                   help="output file; the format follows the extension (.csv .tsv .txt .ecsv .fits .xml, .gz)")
    p.add_argument("--format", choices=["csv", "tsv", "txt", "ecsv", "fits", "votable"],
                   help="output format (default: from the extension)")
    p.add_argument("--no-sidecar", action="store_true", help="ECSV only: keep the truth in the file's metadata only")
    p.add_argument("--object", dest="object_id", default="sim", metavar="NAME", help="designation (default: sim)")
    p.add_argument("--seed", type=int, default=None,
                   help="random seed (default: fresh randomness; the seed drawn is recorded in the truth)")
    p.add_argument("--json", action="store_true", help="print the truth as JSON")
    p.add_argument("--quiet", action="store_true", help="print nothing on success")

    g = p.add_argument_group("rotation state")
    g.add_argument("--mode", choices=["pa", "sam", "lam"], default="pa", help="rotation mode (default: pa)")
    g.add_argument("--state", metavar="JSON", help="read the rotation state from a JSON file instead "
                   "(RotationState fields, or mode with p_psi_h and p_phi_h)")
    g.add_argument("--period", type=float, default=6.0, metavar="H", help="PA rotation period, hours (default: 6)")
    g.add_argument("--p-psi", type=float, metavar="H", help="NPA rotation period P_psi, hours")
    g.add_argument("--p-phi", type=float, metavar="H", help="NPA precession period P_phi, hours (with --p-psi)")
    g.add_argument("--id-i3", type=float, metavar="X",
                   help="NPA dynamic inertia I_d/I3 instead of --p-phi (SAM: I2 < I_d < I3, LAM: I1 < I_d < I2)")
    g.add_argument("--inertia", metavar="I1,I2",
                   help="moment ratios I1/I3,I2/I3 (default: those of a homogeneous ellipsoid with --axes)")
    g.add_argument("--spin", default="30,60", metavar="LON,LAT",
                   help="angular-momentum (spin) direction, ecliptic J2000 degrees (default: 30,60)")
    g.add_argument("--phi0", type=float, default=0.0, metavar="DEG", help="Euler angle phi at the epoch (default 0)")
    g.add_argument("--psi0", type=float, default=0.0, metavar="DEG", help="Euler angle psi at the epoch (NPA; default 0)")
    g.add_argument("--epoch", type=float, metavar="JD", help="epoch of the state, JD TDB (default: the start)")

    g = p.add_argument_group("shape and scattering")
    g.add_argument("--axes", default="2.0,1.4,1.0", metavar="A,B,C", help="semi-axes a >= b >= c (default: 2,1.4,1)")
    g.add_argument("--h-mag", type=float, default=15.0, metavar="MAG",
                   help="magnitude of the equal-volume sphere at 1 au, zero phase (default: 15)")
    g.add_argument("--law", choices=LAWS, default="lommel-seeliger",
                   help="scattering law from the registry (default: lommel-seeliger closed form; "
                        "see docs/methods-brightness.md)")
    g.add_argument("--lambert-weight", type=float, default=DEFAULT_LAMBERT_WEIGHT, metavar="C",
                   help=f"Lambert weight c of ls-lambert (default: {DEFAULT_LAMBERT_WEIGHT:g})")
    tr = g.add_mutually_exclusive_group()
    tr.add_argument("--phase-slope", type=float, metavar="MAG_PER_DEG", help="linear phase trend, mag/deg")
    tr.add_argument("--hg", type=float, metavar="G", help="H,G phase trend with slope parameter G")

    g = p.add_argument_group("observing plan")
    g.add_argument("--plan", choices=["dense", "sparse"], default="dense", help="plan (default: dense)")
    g.add_argument("--start", type=float, default=DEFAULT_START_JD_UTC, metavar="JD",
                   help=f"start, JD UTC (default: {DEFAULT_START_JD_UTC})")
    g.add_argument("--nights", type=int, metavar="N", help="nights observed (default: dense 5, sparse 60)")
    g.add_argument("--hours-per-night", type=float, default=6.0, metavar="H", help="dense: hours per night (6)")
    g.add_argument("--cadence-min", type=float, default=5.0, metavar="MIN", help="dense: minutes between points (5)")
    g.add_argument("--night-spacing", type=float, default=1.0, metavar="D", help="dense: days between nights (1)")
    g.add_argument("--zero-point-sigma", type=float, default=0.0, metavar="MAG",
                   help="dense: scatter of the per-night zero points, mag (0)")
    g.add_argument("--span-days", type=float, default=365.0, metavar="D", help="sparse: survey length, days (365)")
    g.add_argument("--points-per-night", type=int, default=2, metavar="N", help="sparse: visits per night (2)")
    g.add_argument("--visit-spacing-min", type=float, default=30.0, metavar="MIN",
                   help="sparse: mean minutes between visits in a night (30)")
    g.add_argument("--min-elongation", type=float, default=0.0, metavar="DEG",
                   help="sparse: drop visits closer to the Sun than DEG of solar elongation (0: keep all)")
    g.add_argument("--band", help="band label (default: dense V, sparse r)")
    g.add_argument("--elements", metavar="A,E,I,NODE,PERI,M,EPOCH",
                   help="heliocentric ecliptic J2000 elements (au, deg, JD TDB); default: an invented orbit "
                        "at opposition at the start")
    g.add_argument("--observatory", metavar="LON,LAT,HEIGHT_M", help="ground station (default: geocentre)")

    g = p.add_argument_group("binary (mutual events)")
    g.add_argument("--binary-orbit", type=float, metavar="H",
                   help="add a spherical satellite on a circular orbit of this period, hours (mutual eclipses and "
                        "occultations; default: none)")
    g.add_argument("--size-ratio", type=float, default=0.3, metavar="Q",
                   help="binary: satellite-to-primary radius ratio (default: 0.3)")
    g.add_argument("--orbit-radius", type=float, default=4.0, metavar="A",
                   help="binary: orbit radius in primary radii (default: 4)")
    g.add_argument("--orbit-pole", metavar="LON,LAT",
                   help="binary: orbit pole, ecliptic J2000 degrees (default: the spin direction --spin)")
    g.add_argument("--orbit-phase", type=float, default=0.0, metavar="DEG",
                   help="binary: satellite's orbital longitude from the ascending node at the epoch (default 0)")
    g.add_argument("--satellite-amplitude", type=float, default=0.0, metavar="MAG",
                   help="binary: peak-to-peak amplitude of the satellite's own rotation, mag of its flux (default 0)")
    g.add_argument("--satellite-period", type=float, metavar="H",
                   help="binary: satellite rotation period, hours (default: synchronous, the orbit period)")

    g = p.add_argument_group("noise")
    g.add_argument("--sigma", type=float, default=0.01, metavar="MAG", help="Gaussian noise, mag (0.01)")
    g.add_argument("--outlier-fraction", type=float, default=0.0, metavar="F", help="fraction of outliers (0)")
    g.add_argument("--outlier-sigma", type=float, default=0.3, metavar="MAG", help="outlier scatter, mag (0.3)")
    p.set_defaults(run=run)


def _state(args, axes, start_tdb):
    import json
    from pathlib import Path

    from tumble.brightness import inertia_ratios_from_axes
    from tumble.dynamics import RotationState
    from tumble.simulate import SimulationError, state_from_dict

    if args.state:
        path = Path(args.state)
        try:
            data = json.loads(path.read_text())
        except FileNotFoundError:
            raise SimulationError(f"{path}: no such state file") from None
        except (OSError, ValueError) as exc:
            raise SimulationError(f"{path}: not a readable JSON state ({exc})") from None
        if not isinstance(data, dict):
            raise SimulationError(f"{path}: the JSON state must be an object")
        data = data.get("state", data)  # a truth file holds the state under 'state'
        return state_from_dict(data)
    lon, lat = _pair(args.spin, "spin")
    epoch = args.epoch if args.epoch is not None else start_tdb
    if args.inertia:
        i1, i2 = _pair(args.inertia, "inertia")
    else:
        i1, i2 = (float(v) for v in inertia_ratios_from_axes(axes))
    if args.mode == "pa":
        return RotationState.principal_axis(args.period, lon, lat, args.phi0, epoch, i1, i2)
    if args.p_psi is None:
        raise SimulationError(f"--mode {args.mode} needs --p-psi (and --p-phi or --id-i3)")
    if args.id_i3 is not None:
        state = RotationState.excited(i1, i2, args.id_i3, args.p_psi, lon, lat, args.phi0, args.psi0, epoch)
        if state.mode.lower() != args.mode:
            raise SimulationError(f"--id-i3 {args.id_i3} gives a {state.mode} state, not {args.mode.upper()} "
                                  f"(SAM needs I2/I3 = {i2:.6g} < I_d/I3 < 1, LAM needs {i1:.6g} < I_d/I3 < {i2:.6g})")
        return state
    if args.p_phi is None:
        raise SimulationError(f"--mode {args.mode} needs --p-phi or --id-i3 besides --p-psi")
    return RotationState.from_periods(i1, i2, args.p_psi, args.p_phi, args.mode.upper(), lon, lat, args.phi0,
                                      args.psi0, epoch)


def _binary(args, start_tdb):
    """The BinaryOrbit of --binary-orbit (None without it)."""
    import math

    from tumble.mutual_events import BinaryOrbit

    if args.binary_orbit is None:
        return None
    lon, lat = _pair(args.orbit_pole or args.spin, "orbit-pole")
    epoch = args.epoch if args.epoch is not None else start_tdb
    return BinaryOrbit(args.binary_orbit, args.size_ratio, args.orbit_radius, lon, lat, args.orbit_phase, epoch,
                       args.satellite_amplitude,
                       math.nan if args.satellite_period is None else args.satellite_period)


def run(args: argparse.Namespace) -> int:
    import numpy as np

    from tumble.brightness import PhaseTrend
    from tumble.simulate import (DenseCampaign, NoiseModel, SimulationError, SparseSurvey, simulate_lightcurve,
                                 utc_to_tdb, write_simulation)

    axes = _pair(args.axes, "axes", 3)
    if args.plan == "dense":
        plan = DenseCampaign(args.start, n_nights=args.nights or 5, hours_per_night=args.hours_per_night,
                             cadence_min=args.cadence_min, night_spacing_d=args.night_spacing,
                             zero_point_sigma_mag=args.zero_point_sigma, band=args.band or "V")
    else:
        plan = SparseSurvey(args.start, span_d=args.span_days, n_nights=args.nights or 60,
                            points_per_night=args.points_per_night, visit_spacing_min=args.visit_spacing_min,
                            band=args.band or "r", min_elongation_deg=args.min_elongation)
    start_tdb = float(utc_to_tdb([args.start])[1][0])
    state = _state(args, np.asarray(axes), start_tdb)
    if args.phase_slope is not None:
        trend = PhaseTrend("linear", slope_mag_per_deg=args.phase_slope)
    elif args.hg is not None:
        trend = PhaseTrend("hg", g=args.hg)
    else:
        trend = PhaseTrend()
    noise = NoiseModel(sigma_mag=args.sigma, outlier_fraction=args.outlier_fraction,
                       outlier_sigma_mag=args.outlier_sigma)
    binary = _binary(args, start_tdb)
    if args.no_sidecar and not (args.format == "ecsv" or (args.format is None and ".ecsv" in args.out.lower())):
        raise SimulationError(f"{args.out}: --no-sidecar needs ECSV output (the only format that holds the truth)")
    if args.seed is None:  # fresh randomness, but recorded, so the simulation can be repeated
        args.seed = int(np.random.SeedSequence().generate_state(1, dtype=np.uint32)[0])
    sim = simulate_lightcurve(state, axes, plan, parse_elements(args.elements),
                              observatory=parse_observatory(args.observatory), h_mag=args.h_mag, law=args.law,
                              lambert_weight=args.lambert_weight, trend=trend, noise=noise,
                              object_id=args.object_id, rng=args.seed, binary=binary)
    written = write_simulation(sim, args.out, format=args.format, sidecar=not args.no_sidecar)
    if args.json:
        print_json(sim.truth)
    elif not args.quiet:
        lc = sim.lightcurve
        s = sim.truth["state"]
        periods = (f"P = {s['p_psi_h']:.6g} h" if s["mode"] == "PA"
                   else f"P_psi = {s['p_psi_h']:.6g} h, P_phi = {s['p_phi_h']:.6g} h, E/E0 = {s['excitation_e_over_e0']:.6g}")
        print(f"wrote {written[0]}: {lc.n_points} points on {sim.truth['n_nights']} nights over {lc.span_d:.2f} d, "
              f"{s['mode']} ({periods}), phase {lc.phase_deg.min():.1f}-{lc.phase_deg.max():.1f} deg")
        if binary is not None:
            print(f"  binary: P_orb = {binary.p_orb_h:.6g} h, R2/R1 = {binary.size_ratio:g}, "
                  f"a = {binary.orbit_radius:g} R1 (mutual events of two spheres)")
        for extra in written[1:]:
            print(f"wrote {extra}: truth")
    return 0
