"""Injection-recovery completeness of a survey's cadence.

What could this survey have detected at all? Simulated PA and NPA rotators are
injected onto the *real* cadences of a survey's objects and classified by the
same route as the survey; the fraction classified NPA, per bin of period and
amplitude, is the detection probability (injected NPA) or the false-NPA rate
(injected PA).

One injection is one light curve:

1. a cadence object is drawn from the plan input (its times, sessions, bands,
   quoted errors and geometry are kept as they are);
2. a rotation state and an ellipsoid shape are drawn from
   :class:`InjectionDistributions` (every draw from a generator seeded by
   ``(seed, injection index)``, so injection ``k`` is the same whatever ``N``);
3. noise-free magnitudes come from :func:`tumble.simulate.model_magnitudes` at
   the object's own light-time-corrected times, Sun and observer directions and
   distances; then a zero-point per session (N(0, 0.03 mag)) and Gaussian noise
   at each point's quoted error are added.

When the plan object has no Sun/observer vectors (e.g. sparse tables with r,
Delta and phase angle only), the directions are those of an invented orbit at
opposition at the start of its data (:func:`tumble.simulate.opposition_elements`),
with the Sun direction turned about the observer direction so that the phase
angle is the object's own where it is known; the distances are the object's own.

Results are scientific estimates of the *pipeline's* sensitivity for these
cadences and these stated parameter distributions, not of the true population.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

from tumble.exceptions import TumbleError

__all__ = [
    "InjectionDistributions",
    "Injection",
    "load_plans",
    "draw_injection",
    "inject_lightcurve",
    "binomial_interval",
    "completeness_table",
    "write_completeness",
    "plot_completeness",
    "run_completeness",
    "CompletenessResult",
    "DEFAULT_PERIOD_BINS_H",
    "DEFAULT_AMPLITUDE_BINS_MAG",
]

DEFAULT_PERIOD_BINS_H = (2.0, 4.0, 8.0, 16.0, 32.0, 64.0)
DEFAULT_AMPLITUDE_BINS_MAG = (0.05, 0.15, 0.3, 0.5, 0.8)
ZERO_POINT_SIGMA_MAG = 0.03
CONFIDENCE = 0.95


class CompletenessError(TumbleError, ValueError):
    """Bad completeness settings or plan input."""


@dataclass(frozen=True)
class InjectionDistributions:
    """The stated parameter distributions of the injected rotators.

    Attributes
    ----------
    period_bins_h : tuple of float
        Edges of the period bins, hours; periods are drawn log-uniform between
        the first and last edge. The period is the rotation period for PA and
        P_psi (rotation about the body axis) for NPA.
    amplitude_bins_mag : tuple of float
        Edges of the amplitude bins, mag; the amplitude ``A = 2.5 log10(a/b)``
        (equator-on, zero-phase amplitude of an ellipsoid) is drawn uniformly
        between the first and last edge, which sets a/b.
    b_over_c : (float, float)
        b/c drawn uniformly in this range (a > b > c, so NPA is possible).
    npa_fraction : float
        Fraction of injections that are NPA (exactly: injection k is NPA when
        ``floor((k+1) f) > floor(k f)``).
    lam_fraction : float
        Fraction of the NPA injections in the long-axis mode (LAM), drawn at random.
    excitation_margin : float
        The dynamic inertia ``Id/I3`` is drawn uniformly in the mode's open
        interval ((I2/I3, 1) for SAM, (I1/I3, I2/I3) for LAM) shrunk by this
        fraction of its width at each end (away from PA and the separatrix).
    Angular-momentum directions are isotropic (ecliptic longitude uniform,
    sine of latitude uniform); the initial angles phi0, psi0 uniform in 0..360 deg.
    """

    period_bins_h: tuple = DEFAULT_PERIOD_BINS_H
    amplitude_bins_mag: tuple = DEFAULT_AMPLITUDE_BINS_MAG
    b_over_c: tuple = (1.05, 1.5)
    npa_fraction: float = 0.5
    lam_fraction: float = 0.5
    excitation_margin: float = 0.05

    def __post_init__(self):
        for name, unit in (("period_bins_h", "h"), ("amplitude_bins_mag", "mag")):
            edges = tuple(float(v) for v in getattr(self, name))
            if len(edges) < 2 or not all(np.isfinite(edges)) or edges[0] <= 0 or np.any(np.diff(edges) <= 0):
                raise CompletenessError(f"{name}: need at least two positive, increasing edges ({unit}), got {edges}")
            object.__setattr__(self, name, edges)
        lo, hi = (float(v) for v in self.b_over_c)
        if not (1.0 < lo <= hi):
            raise CompletenessError(f"b_over_c range must satisfy 1 < low <= high, got {self.b_over_c}")
        for name in ("npa_fraction", "lam_fraction"):
            if not 0.0 <= getattr(self, name) <= 1.0:
                raise CompletenessError(f"{name} must lie in [0, 1], got {getattr(self, name)}")
        if not 0.0 <= self.excitation_margin < 0.5:
            raise CompletenessError(f"excitation_margin must lie in [0, 0.5), got {self.excitation_margin}")

    def to_dict(self) -> dict:
        """JSON-ready description (written into the table's metadata)."""
        d = asdict(self)
        return {k: list(v) if isinstance(v, tuple) else v for k, v in d.items()}


@dataclass(frozen=True)
class Injection:
    """The truth of one injection.

    Attributes
    ----------
    object_id : str
        Name of the injected object (``inj-000042``).
    index : int
        Injection index k.
    plan_object : str
        The survey object whose cadence was used.
    truth : {'PA', 'NPA'}
    mode : {'none', 'SAM', 'LAM'}
    period_h : float
        Rotation period (PA) or P_psi (NPA), h.
    p_phi_h : float
        Precession period P_phi (NPA; equal to period_h for PA), h.
    amplitude_mag : float
        ``2.5 log10(a/b)``, mag.
    axes : tuple of float
        Semi-axes (a, b, c) with c = 1.
    id_i3 : float
        Dynamic inertia ratio Id/I3 (1 for PA).
    l_lon_deg, l_lat_deg, phi0_deg, psi0_deg : float
        Spin (angular-momentum) direction and initial angles, degrees.
    """

    object_id: str
    index: int
    plan_object: str
    truth: str
    mode: str
    period_h: float
    p_phi_h: float
    amplitude_mag: float
    axes: tuple
    id_i3: float
    l_lon_deg: float
    l_lat_deg: float
    phi0_deg: float
    psi0_deg: float


# ---------------------------------------------------------------------------
# Plans


def load_plans(inputs, read_options=None) -> tuple[list, list[str]]:
    """Read the cadence objects of a survey: (light curves, one-line problems of the unusable ones).

    Raises :class:`CompletenessError` when no object of the input is usable.
    """
    from tumble.exceptions import PhotometryError
    from tumble.photometry import read_lightcurve
    from tumble.survey import SurveyError, collect_objects

    try:
        tasks = collect_objects(inputs, read_options)
    except SurveyError as exc:
        raise CompletenessError(f"plan input: {exc}") from None
    plans, problems = [], []
    for task in tasks:
        if task.error is not None:
            problems.append(task.error)
            continue
        lc = task.lightcurve
        if lc is None:
            try:
                lc = read_lightcurve(list(task.paths), options=read_options, object_id=task.object_id)
            except (PhotometryError, TumbleError) as exc:
                problems.append(str(exc))
                continue
        if lc.n_points < 3:
            problems.append(f"{task.object_id}: only {lc.n_points} points, too few for a cadence")
            continue
        plans.append(lc)
    if not plans:
        first = problems[0] if problems else "no objects"
        raise CompletenessError(f"plan input has no usable cadence ({len(problems)} unusable; first: {first})")
    return plans, problems


# ---------------------------------------------------------------------------
# Drawing and injecting


def _injection_rng(seed: int, index: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence([int(seed) % (2**32), int(index), 0x1A7E]))


def draw_injection(index: int, n_plans: int, plan_names, dist: InjectionDistributions, seed: int):
    """The truth of injection ``index`` and its RotationState (deterministic in ``seed`` and ``index``)."""
    from tumble.brightness import inertia_ratios_from_axes
    from tumble.dynamics import RotationState

    g = _injection_rng(seed, index)
    f = dist.npa_fraction
    is_npa = math.floor((index + 1) * f) > math.floor(index * f)
    plan_idx = int(g.integers(n_plans))
    p_lo, p_hi = dist.period_bins_h[0], dist.period_bins_h[-1]
    period = float(math.exp(g.uniform(math.log(p_lo), math.log(p_hi))))
    amp = float(g.uniform(dist.amplitude_bins_mag[0], dist.amplitude_bins_mag[-1]))
    b_c = float(g.uniform(*dist.b_over_c))
    axes = (10 ** (amp / 2.5) * b_c, b_c, 1.0)
    lon = float(g.uniform(0.0, 360.0))
    lat = float(math.degrees(math.asin(g.uniform(-1.0, 1.0))))
    phi0, psi0 = (float(v) for v in g.uniform(0.0, 360.0, size=2))
    lam = bool(g.random() < dist.lam_fraction)
    u = float(g.random())
    if is_npa:
        i1, i2 = (float(v) for v in inertia_ratios_from_axes(np.array(axes)))
        lo, hi = (i1, i2) if lam else (i2, 1.0)
        m = dist.excitation_margin * (hi - lo)
        idd = lo + m + u * (hi - lo - 2 * m)
        state = RotationState.excited(i1, i2, idd, period, lon, lat, phi0, psi0, epoch_jd=0.0)
        mode, p_phi = state.mode, float(state.p_phi_h)
    else:
        idd, mode, p_phi = 1.0, "none", period
    inj = Injection(object_id=f"inj-{index:06d}", index=int(index), plan_object=str(plan_names[plan_idx]),
                    truth="NPA" if is_npa else "PA", mode=mode, period_h=period, p_phi_h=p_phi, amplitude_mag=amp,
                    axes=tuple(float(a) for a in axes), id_i3=float(idd), l_lon_deg=lon, l_lat_deg=lat,
                    phi0_deg=phi0, psi0_deg=psi0)
    return inj, plan_idx


def _state(inj: Injection, epoch_jd: float):
    from tumble.brightness import inertia_ratios_from_axes
    from tumble.dynamics import RotationState

    if inj.truth == "PA":
        return RotationState.principal_axis(inj.period_h, inj.l_lon_deg, inj.l_lat_deg, inj.phi0_deg, epoch_jd)
    i1, i2 = (float(v) for v in inertia_ratios_from_axes(np.array(inj.axes)))
    return RotationState.excited(i1, i2, inj.id_i3, inj.period_h, inj.l_lon_deg, inj.l_lat_deg, inj.phi0_deg,
                                 inj.psi0_deg, epoch_jd=epoch_jd)


def _unit(v):
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def _directions(lc):
    """Sun and observer unit vectors of a plan object: its own, or an invented orbit's (phase kept)."""
    if lc.sun_dir is not None and lc.obs_dir is not None:
        return np.asarray(lc.sun_dir, float), np.asarray(lc.obs_dir, float), "own"
    from tumble import geometry
    from tumble.simulate import opposition_elements

    t = np.asarray(lc.t, float)
    geo = geometry.observing_geometry(t, opposition_elements(float(t[0])))
    s, o = geo.sun_dir, geo.obs_dir
    if lc.phase_deg is None:
        return s, o, "invented orbit"
    perp = s - np.sum(s * o, axis=1, keepdims=True) * o
    small = np.linalg.norm(perp, axis=1) < 1e-9
    if np.any(small):  # exactly at opposition: any direction perpendicular to o
        alt = np.cross(o[small], np.array([0.0, 0.0, 1.0]))
        perp[small] = alt
    perp = _unit(perp)
    a = np.radians(np.asarray(lc.phase_deg, float))[:, None]
    return _unit(np.cos(a) * o + np.sin(a) * perp), o, "invented orbit, own phase angle"


def inject_lightcurve(lc, inj: Injection, seed: int, directions=None):
    """The light curve of injection ``inj`` on the cadence, errors and geometry of ``lc``.

    ``directions``: the ``(sun_dir, obs_dir, source)`` of ``lc`` if already computed (they depend on the
    plan object only). Returns (LightCurve, model peak-to-peak amplitude on the cadence in mag, geometry source).
    """
    from tumble.simulate import model_magnitudes

    g = np.random.default_rng(np.random.SeedSequence([int(seed) % (2**32), int(inj.index), 0x40153]))
    t = np.asarray(lc.t, float)
    state = _state(inj, float(t[0]))
    s, o, source = directions if directions is not None else _directions(lc)
    model = model_magnitudes(state, inj.axes, t, s, o, phase_deg=lc.phase_deg)
    amp_on_cadence = float(np.ptp(model))
    if lc.r_au is not None and lc.delta_au is not None:
        model = model + 5.0 * np.log10(np.asarray(lc.r_au) * np.asarray(lc.delta_au))
    model = model - np.median(model) + float(np.median(lc.mag))
    session = np.asarray(lc.session)
    n_sess = int(session.max()) + 1 if session.size and session.max() >= 0 else 0
    zp = ZERO_POINT_SIGMA_MAG * g.standard_normal(n_sess)
    offset = np.where(session >= 0, zp[np.maximum(session, 0)] if n_sess else 0.0, 0.0)
    err = np.asarray(lc.err, float)
    mag = model + offset + err * g.standard_normal(t.size)
    meta = dict(lc.meta)
    meta["injection"] = {"object": inj.object_id, "plan_object": lc.object_id, "geometry": source}
    new = replace(lc, object_id=inj.object_id, mag=mag, meta=meta)
    return new, amp_on_cadence, source


# ---------------------------------------------------------------------------
# Statistics and the table


def binomial_interval(k, n, confidence: float = CONFIDENCE):
    """Exact (Clopper-Pearson 1934, Biometrika 26, 404) interval of a binomial proportion k/n.

    Beta quantiles: ``lo = B^-1(alpha/2; k, n-k+1)``, ``hi = B^-1(1-alpha/2; k+1, n-k)``
    (0 and 1 at the ends); NaN for n = 0. Arrays broadcast.
    """
    from scipy.special import betaincinv

    k = np.asarray(k, dtype=float)
    n = np.asarray(n, dtype=float)
    alpha = 1.0 - confidence
    with np.errstate(invalid="ignore", divide="ignore"):
        lo = np.where(k > 0, betaincinv(np.maximum(k, 1e-300), np.maximum(n - k + 1, 1e-300), alpha / 2), 0.0)
        hi = np.where(k < n, betaincinv(np.maximum(k + 1, 1e-300), np.maximum(n - k, 1e-300), 1 - alpha / 2), 1.0)
    bad = n <= 0
    lo = np.where(bad, np.nan, lo)
    hi = np.where(bad, np.nan, hi)
    return (float(lo), float(hi)) if lo.ndim == 0 else (lo, hi)


COMPLETENESS_COLUMNS = (
    ("truth", "", "injected rotation: NPA (rows give the detection probability) or PA (the false-NPA rate)"),
    ("scope", "", "bin (one period x amplitude bin) or all (every injection of that truth)"),
    ("period_h_lo", "h", "lower edge of the period bin (rotation period for PA, P_psi for NPA)"),
    ("period_h_hi", "h", "upper edge of the period bin"),
    ("amplitude_mag_lo", "mag", "lower edge of the amplitude bin (A = 2.5 log10(a/b))"),
    ("amplitude_mag_hi", "mag", "upper edge of the amplitude bin"),
    ("n_injected", "", "injections in the bin"),
    ("n_error", "", "injections whose classification failed (error rows; not in the fractions)"),
    ("n_classified", "", "injections classified (status ok)"),
    ("n_npa", "", "classified NPA"),
    ("n_pa", "", "classified PA"),
    ("n_undecided", "", "classified undecided"),
    ("frac_npa", "", "n_npa / n_classified: detection probability (truth NPA) or false-NPA rate (truth PA)"),
    ("frac_npa_lo", "", "lower end of the 95% Clopper-Pearson interval of frac_npa"),
    ("frac_npa_hi", "", "upper end of the 95% Clopper-Pearson interval of frac_npa"),
)

INJECTION_COLUMNS = (
    ("truth", "", "injected rotation, PA or NPA"),
    ("true_mode", "", "injected mode: SAM, LAM or none"),
    ("true_period_h", "h", "injected rotation period (PA) or P_psi (NPA)"),
    ("true_p_phi_h", "h", "injected P_phi (NPA; the period for PA)"),
    ("true_amplitude_mag", "mag", "2.5 log10(a/b) of the injected ellipsoid"),
    ("model_amplitude_mag", "mag", "peak-to-peak of the noise-free rotational model at the observed times"),
    ("true_b_over_c", "", "b/c of the injected ellipsoid"),
    ("true_id_i3", "", "injected dynamic inertia ratio Id/I3 (1 for PA)"),
    ("true_l_lon_deg", "deg", "ecliptic longitude of the injected angular momentum"),
    ("true_l_lat_deg", "deg", "ecliptic latitude of the injected angular momentum"),
    ("plan_object", "", "the survey object whose cadence, errors and geometry were used"),
    ("geometry", "", "source of the Sun/observer directions: own, or an invented orbit"),
)


def _bin_index(values, edges):
    idx = np.searchsorted(np.asarray(edges), np.asarray(values, float), side="right") - 1
    return np.clip(idx, 0, len(edges) - 2)


#: A screened object states no rotation: its flag counts as the outcome (candidate = detected).
SCREEN_OUTCOME = {"candidate": "NPA", "quiet": "PA", "unknown": "undecided"}


def outcome(row) -> str:
    """The outcome of a results row: its rotation, or for a screened row the outcome of its screen flag."""
    rotation = row.get("rotation", "") or ""
    if rotation:
        return str(rotation)
    return SCREEN_OUTCOME.get(str(row.get("screen_flag", "") or ""), "undecided")


def completeness_table(injections, rows, dist: InjectionDistributions, meta: dict | None = None):
    """The completeness table (astropy Table) from the injections and their results rows.

    ``rows`` maps object name -> results row (status, rotation, ...).
    """
    import astropy.units as u
    from astropy.table import Column, Table

    pe, ae = dist.period_bins_h, dist.amplitude_bins_mag
    out = {name: [] for name, _, _ in COMPLETENESS_COLUMNS}

    def add(truth, scope, plo, phi, alo, ahi, members):
        status = [rows[m.object_id]["status"] for m in members]
        rot = [outcome(rows[m.object_id]) for m in members if rows[m.object_id]["status"] == "ok"]
        n_ok, n_npa = len(rot), sum(r == "NPA" for r in rot)
        lo, hi = binomial_interval(n_npa, n_ok)
        for key, val in (("truth", truth), ("scope", scope), ("period_h_lo", plo), ("period_h_hi", phi),
                         ("amplitude_mag_lo", alo), ("amplitude_mag_hi", ahi), ("n_injected", len(members)),
                         ("n_error", sum(s == "error" for s in status)), ("n_classified", n_ok), ("n_npa", n_npa),
                         ("n_pa", sum(r == "PA" for r in rot)), ("n_undecided", sum(r == "undecided" for r in rot)),
                         ("frac_npa", n_npa / n_ok if n_ok else math.nan), ("frac_npa_lo", lo), ("frac_npa_hi", hi)):
            out[key].append(val)

    for truth in ("NPA", "PA"):
        group = [i for i in injections if i.truth == truth]
        pi = _bin_index([i.period_h for i in group], pe)
        ai = _bin_index([i.amplitude_mag for i in group], ae)
        for a in range(len(ae) - 1):
            for p in range(len(pe) - 1):
                members = [g for g, pp, aa in zip(group, pi, ai) if pp == p and aa == a]
                add(truth, "bin", pe[p], pe[p + 1], ae[a], ae[a + 1], members)
        add(truth, "all", pe[0], pe[-1], ae[0], ae[-1], group)
    table = Table()
    for name, unit, desc in COMPLETENESS_COLUMNS:
        data = out[name]
        if name in ("truth", "scope"):
            arr = np.array(data, dtype=str)
        elif name.startswith("n_"):
            arr = np.array(data, dtype=np.int64)
        else:
            arr = np.array(data, dtype=np.float64)
        table[name] = Column(arr, unit=u.Unit(unit) if unit else None, description=desc)
    table.meta["schema"] = "tumble completeness v1"
    table.meta["confidence"] = CONFIDENCE
    table.meta["interval"] = "Clopper-Pearson (exact binomial)"
    table.meta["distributions"] = dist.to_dict()
    table.meta.update(meta or {})
    table.meta["caution"] = ("Scientific estimates of the classifier's sensitivity for these cadences and the stated "
                             "injected distributions; not a population estimate, not operational advice.")
    return table


def injections_table(injections, rows, extras):
    """Per-injection table: the results schema plus the truth columns (astropy Table)."""
    import astropy.units as u
    from astropy.table import Column

    from tumble.results import results_table

    table = results_table([rows[i.object_id] for i in injections])
    values = {
        "truth": [i.truth for i in injections], "true_mode": [i.mode for i in injections],
        "true_period_h": [i.period_h for i in injections], "true_p_phi_h": [i.p_phi_h for i in injections],
        "true_amplitude_mag": [i.amplitude_mag for i in injections],
        "model_amplitude_mag": [extras[i.object_id][0] for i in injections],
        "true_b_over_c": [i.axes[1] / i.axes[2] for i in injections], "true_id_i3": [i.id_i3 for i in injections],
        "true_l_lon_deg": [i.l_lon_deg for i in injections], "true_l_lat_deg": [i.l_lat_deg for i in injections],
        "plan_object": [i.plan_object for i in injections], "geometry": [extras[i.object_id][1] for i in injections],
    }
    for name, unit, desc in INJECTION_COLUMNS:
        data = values[name]
        arr = np.array(data, dtype=str) if isinstance(data[0], str) else np.array(data, dtype=np.float64)
        table[name] = Column(arr, unit=u.Unit(unit) if unit else None, description=desc)
    table.meta["schema"] = "tumble injections v1"
    return table


def write_completeness(table, path) -> Path:
    """Write the completeness table atomically (ECSV; FITS by extension)."""
    from tumble._io import atomic_path

    path = Path(path)
    fmt = {".ecsv": "ascii.ecsv", ".fits": "fits"}.get(path.suffix.lower())
    if fmt is None:
        raise CompletenessError(f"{path}: the completeness table is written as .ecsv (or .fits)")
    with atomic_path(path) as tmp:
        table.write(tmp, format=fmt, overwrite=True)
    return path


def plot_completeness(table, path) -> Path:
    """The completeness figure (PNG, written atomically).

    Left: detection probability of injected NPA per period x amplitude bin;
    right: false-NPA rate of injected PA. Each cell is coloured by the fraction of right
    verdicts (injected NPA called NPA; injected PA not called NPA), so a bright cell is good in
    both panels (colour map 'cividis', 0 to 1), and labelled with the fraction classified NPA
    and ``k/n`` (classified NPA / classified); empty bins are white, marked "-".
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.colors import Normalize

    from tumble._io import atomic_path

    bins = table[table["scope"] == "bin"]
    pe = np.unique(np.concatenate([bins["period_h_lo"], bins["period_h_hi"]]))
    ae = np.unique(np.concatenate([bins["amplitude_mag_lo"], bins["amplitude_mag_hi"]]))
    fig, axes = plt.subplots(1, 2, figsize=(12, 5), constrained_layout=True, sharey=True)
    cmap = matplotlib.colormaps["cividis"].with_extremes(bad="white")
    norm = Normalize(0.0, 1.0)
    mesh = None
    # one colour meaning in both panels: the fraction of right answers (bright = good); the cell text
    # keeps the fraction classified NPA
    for ax, truth, title in ((axes[0], "NPA", "injected NPA: detection probability"),
                             (axes[1], "PA", "injected PA: false-NPA rate")):
        right = (lambda f: f) if truth == "NPA" else (lambda f: 1.0 - f)
        sel = bins[bins["truth"] == truth]
        grid = np.full((len(ae) - 1, len(pe) - 1), np.nan)
        for r in sel:
            p = int(np.searchsorted(pe, r["period_h_lo"]))
            a = int(np.searchsorted(ae, r["amplitude_mag_lo"]))
            grid[a, p] = right(r["frac_npa"])
            xc = math.sqrt(r["period_h_lo"] * r["period_h_hi"])
            yc = 0.5 * (r["amplitude_mag_lo"] + r["amplitude_mag_hi"])
            text = (f"{r['frac_npa']:.2f}\n{r['n_npa']}/{r['n_classified']}" if r["n_classified"]
                    else f"-\n0/{r['n_injected']}")
            if np.isfinite(r["frac_npa"]):
                colour = "black" if right(r["frac_npa"]) > 0.55 else "white"
            else:
                colour = "0.35"  # empty bin, on the white background
            ax.text(xc, yc, text, ha="center", va="center", fontsize=9, color=colour)
        mesh = ax.pcolormesh(pe, ae, np.ma.masked_invalid(grid), cmap=cmap, norm=norm, edgecolors="white",
                             linewidth=0.5)
        ax.set_xscale("log")
        ax.set_xticks(pe)
        ax.set_xticklabels([f"{v:g}" for v in pe])
        ax.minorticks_off()
        allrow = table[(table["scope"] == "all") & (table["truth"] == truth)]
        if len(allrow):
            r = allrow[0]
            ax.set_title(f"{title}\nall: {r['frac_npa']:.2f} [{r['frac_npa_lo']:.2f}, {r['frac_npa_hi']:.2f}] "
                         f"({r['n_npa']}/{r['n_classified']})", fontsize=10)
        ax.set_xlabel("injected period (PA rotation period, NPA P_psi) [h]")
    axes[0].set_ylabel("injected amplitude 2.5 log10(a/b) [mag]")
    fig.colorbar(mesh, ax=axes, label="fraction of right verdicts (NPA panel: called NPA; PA panel: not "
                 "called NPA)", shrink=0.9)
    n = int(np.sum(table["n_injected"][table["scope"] == "all"]))
    fig.suptitle(f"Completeness of the classification for this cadence ({n} injections; cell: fraction, "
                 f"NPA/classified)\nscientific estimate for the stated injected distributions", fontsize=11)
    path = Path(path)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110)
    plt.close(fig)
    return path


# ---------------------------------------------------------------------------
# The run


@dataclass(frozen=True)
class CompletenessResult:
    """What a completeness run produced.

    Attributes
    ----------
    table : astropy.table.Table
        The completeness table.
    table_path, injections_path, plot_path : str
        Files written (plot_path empty when no plot was asked for).
    survey : tumble.survey.SurveySummary
        The summary of the injected objects' classification.
    n_plans : int
        Usable cadence objects; ``plan_problems`` lists the unusable ones.
    plan_problems : list of str
    """

    table: object
    table_path: str
    injections_path: str
    plot_path: str
    survey: object
    n_plans: int
    plan_problems: list


def derived_paths(out) -> tuple[Path, Path]:
    """(per-injection results path, plot path) beside the completeness table ``out``."""
    out = Path(out)
    stem = out.name[: -len(out.suffix)] if out.suffix else out.name
    return out.with_name(stem + ".injections.ecsv"), out.with_name(stem + ".png")


def run_completeness(plan_inputs, n_inject: int, out, config=None, *, dist: InjectionDistributions | None = None,
                     read_options=None, workers: int | None = None, scheduler: str | None = None,
                     dask_local: int | None = None, resume: bool = False, progress: bool = True,
                     plot: bool = True) -> CompletenessResult:
    """Inject ``n_inject`` rotators onto the cadences of ``plan_inputs``, classify them, write the table.

    The classification runs through :func:`tumble.survey.run_survey` (same
    route, executors, journal and ``resume``) with ``config`` (a
    :class:`tumble.survey.SurveyConfig`; its seed also seeds the injections).
    Writes ``out`` (completeness table, ECSV), ``<stem>.injections.ecsv``
    (per-injection truth and verdict; its journal beside it) and ``<stem>.png``.
    """
    from tumble.survey import ObjectTask, SurveyConfig, read_journal, journal_path, run_survey

    if not isinstance(n_inject, (int, np.integer)) or n_inject < 1:
        raise CompletenessError(f"--inject must be a positive number of injections, got {n_inject}")
    config = config or SurveyConfig(route="screen")
    dist = dist or InjectionDistributions()
    out = Path(out)
    if out.suffix.lower() not in (".ecsv", ".fits"):
        raise CompletenessError(f"{out}: the completeness table is written as .ecsv (or .fits)")
    inj_path, png_path = derived_paths(out)
    plans, problems = load_plans(plan_inputs, read_options or config.read_options)
    names = [lc.object_id for lc in plans]
    injections, tasks, extras, directions = [], [], {}, {}
    steps = range(int(n_inject))
    if progress and n_inject >= 200:
        from tqdm import tqdm

        steps = tqdm(steps, unit="inj", desc="injections", dynamic_ncols=True)
    for k in steps:
        inj, p = draw_injection(k, len(plans), names, dist, config.seed)
        try:
            if p not in directions:
                directions[p] = _directions(plans[p])
            lc, amp, source = inject_lightcurve(plans[p], inj, config.seed, directions[p])
            task = ObjectTask(inj.object_id, k, lightcurve=lc)
        except TumbleError as exc:  # e.g. a state the dynamics rejects: an error row, the run goes on
            amp, source = math.nan, ""
            task = ObjectTask(inj.object_id, k, error=f"{inj.object_id}: injection failed: {exc}")
        injections.append(inj)
        tasks.append(task)
        extras[inj.object_id] = (amp, source)
    summary = run_survey([], inj_path, config, workers=workers, scheduler=scheduler, dask_local=dask_local,
                         resume=resume, progress=progress, tasks=tasks)
    rows = read_journal(journal_path(inj_path))
    table = completeness_table(injections, rows, dist, meta={
        "n_injections": int(n_inject), "seed": int(config.seed), "route": config.route,
        "prior_npa": float(config.prior_npa), "n_plan_objects": len(plans), "n_plan_unusable": len(problems),
        "zero_point_sigma_mag": ZERO_POINT_SIGMA_MAG,
        "noise": "Gaussian at each point's quoted error",
    })
    from tumble._io import atomic_path

    inj_table = injections_table(injections, rows, extras)
    with atomic_path(inj_path) as tmp:
        inj_table.write(tmp, format="ascii.ecsv", overwrite=True)
    write_completeness(table, out)
    plot_path = ""
    if plot:
        plot_path = str(plot_completeness(table, png_path))
    return CompletenessResult(table=table, table_path=str(out), injections_path=str(inj_path), plot_path=plot_path,
                              survey=summary, n_plans=len(plans), plan_problems=problems)
