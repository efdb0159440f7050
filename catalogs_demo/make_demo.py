"""Generate the demo catalogue (seeded; run from the repository root).

    python catalogs_demo/make_demo.py

The scenario is invented from end to end (see catalogs_demo/README.md): the
Kestrel Ridge Network (KRN), three small observatories that follow up a dozen
near-Earth objects, and the Sparrowhawk Valley Survey (SVS), whose sparse
photometry covers a few hundred main-belt objects. Every light curve comes
from ``tumble.simulate``; the truth of each object is written beside the data
(``truth.ecsv``) so the demo can say how it did.

Outputs (all in this folder):

- ``campaign/KRN-NNN__SITE.{csv,ecsv,fits}``: one file per object and site;
  the object is the part of the name before ``__``. Two files are broken on
  purpose (a corrupt row, a truncated gzip file) to show the error rows.
- ``sparse/svs_sample.csv.gz``: one table, one ``object`` column.
- ``sparse/svs_orbits.csv``: the survey objects' orbital elements (for ``--orbits``: the Sun and
  observer directions the sparse route needs).
- ``census/krn_census.ecsv``: an earlier census of rotation verdicts with
  diameters, in the results schema, for ``tumble relax --sample``.
- ``truth.ecsv``: the truth of every campaign and survey object.
"""

from __future__ import annotations

import gzip
import math
import shutil
from pathlib import Path

import numpy as np

from tumble import brightness
from tumble.dynamics import RotationState
from tumble.geometry import Observatory
from tumble.simulate import DenseCampaign, NoiseModel, SparseSurvey, opposition_elements, simulate_lightcurve, write_simulation

HERE = Path(__file__).resolve().parent
SEED = 20991
START_JD_UTC = 2460580.5  # the campaign season opens (2024 autumn, an arbitrary choice)

# Invented observatories of the Kestrel Ridge Network.
SITES = {
    "kestrel": (Observatory(lon_deg=-105.21, lat_deg=33.84, height_m=2410.0, name="Kestrel Ridge Observatory"), "csv"),
    "lanternbay": (Observatory(lon_deg=147.06, lat_deg=-41.52, height_m=350.0, name="Lantern Bay Station"), "ecsv"),
    "orrin": (Observatory(lon_deg=21.33, lat_deg=38.17, height_m=1790.0, name="Mount Orrin Robotic Telescope"), "fits"),
}

# (designation, rotation, mode, period or (P_psi, P_phi-ish target), axes, sites)
CAMPAIGN = [
    ("KRN-001", "PA", 3.42, (1.45, 1.1, 1.0), ["kestrel"]),
    ("KRN-002", "PA", 7.91, (1.25, 1.05, 1.0), ["kestrel", "orrin"]),
    ("KRN-003", "SAM", (58.0, 0.985), (1.6, 1.2, 1.0), ["kestrel", "lanternbay"]),
    ("KRN-004", "PA", 5.27, (1.8, 1.3, 1.0), ["lanternbay"]),
    ("KRN-005", "LAM", (41.0, 0.55), (2.0, 1.3, 1.0), ["orrin", "kestrel"]),
    ("KRN-006", "PA", 12.6, (1.35, 1.2, 1.0), ["kestrel"]),
    ("KRN-007", "SAM", (86.0, 0.97), (1.5, 1.25, 1.0), ["lanternbay", "orrin", "kestrel"]),
    ("KRN-008", "PA", 2.71, (1.3, 1.15, 1.0), ["orrin"]),
    ("KRN-009", "PA", 9.84, (1.55, 1.35, 1.0), ["kestrel", "lanternbay"]),
    ("KRN-010", "LAM", (33.0, 0.6), (1.9, 1.2, 1.0), ["kestrel"]),
    ("KRN-011", "PA", 4.66, (1.4, 1.2, 1.0), ["lanternbay"]),  # its file gets a corrupt row
    ("KRN-012", "SAM", (70.0, 0.99), (1.7, 1.3, 1.0), ["orrin"]),  # its file gets truncated
]


def _state(rotation, spec, axes, rng, epoch):
    lon, lat = rng.uniform(0, 360), math.degrees(math.asin(rng.uniform(-1, 1)))
    if rotation == "PA":
        return RotationState.principal_axis(spec, lon, lat, phase0_deg=rng.uniform(0, 360), epoch_jd=epoch)
    i1, i2 = brightness.inertia_ratios_from_axes(axes)
    p_psi, frac = spec
    # frac places I_d/I3 inside the mode's range: SAM between I2 and I3, LAM between I1 and I2
    id_i3 = i2 + frac * (1 - i2) if rotation == "SAM" else i1 + frac * (i2 - i1)
    return RotationState.excited(i1, i2, id_i3, p_psi, lon, lat, rng.uniform(0, 360), rng.uniform(0, 360), epoch)


def _diameter_km(h_mag, albedo):
    # D = 1329 km / sqrt(p_V) 10^(-H/5) (Pravec & Harris 2007)
    return 1329.0 / math.sqrt(albedo) * 10 ** (-h_mag / 5)


def _truth_row(name, sample, state, h_mag, albedo, n_nights):
    pa = state.mode == "PA"
    return dict(
        object=name, sample=sample, rotation="PA" if pa else "NPA", mode="none" if pa else state.mode,
        period_h=state.p_psi_h if pa else np.nan, p_psi_h=np.nan if pa else state.p_psi_h,
        p_phi_h=np.nan if pa else state.p_phi_h, h_mag=h_mag, albedo=albedo,
        diameter_km=_diameter_km(h_mag, albedo), n_nights=n_nights,
    )


def make_campaign(rng, truth_rows):
    out = HERE / "campaign"
    shutil.rmtree(out, ignore_errors=True)
    out.mkdir()
    for k, (name, rotation, spec, axes, sites) in enumerate(CAMPAIGN):
        a_au = rng.uniform(1.05, 1.6)
        elements = opposition_elements(START_JD_UTC + 0.0008, a_au=a_au, e=rng.uniform(0.05, 0.35),
                                       i_deg=rng.uniform(1, 20), node_deg=rng.uniform(0, 360),
                                       peri_deg=rng.uniform(0, 360), days_before=rng.uniform(-5, 5))
        state = _state(rotation, spec, axes, rng, epoch=START_JD_UTC)
        h_mag = rng.uniform(16.5, 19.5)
        albedo = float(np.exp(rng.normal(np.log(0.2), 0.3)))
        n_nights_total = 0
        for j, site in enumerate(sites):
            obs, fmt = SITES[site]
            start = START_JD_UTC + 0.5 * (obs.lon_deg < 0) + 4.0 * j + rng.uniform(0, 0.1)
            plan = DenseCampaign(start_jd_utc=start, n_nights=int(rng.integers(4, 8)),
                                 hours_per_night=float(rng.uniform(4.5, 7.0)), cadence_min=float(rng.choice([4, 5, 6, 8])),
                                 zero_point_sigma_mag=0.03, band="R")
            n_nights_total += plan.n_nights
            noise = NoiseModel(sigma_mag=float(rng.uniform(0.008, 0.025)))
            law = "ls-lambert" if k % 3 == 0 else "lommel-seeliger"
            sim = simulate_lightcurve(state, axes, plan, elements, observatory=obs, h_mag=h_mag, law=law,
                                      trend=brightness.PhaseTrend(kind="linear", slope_mag_per_deg=0.025),
                                      noise=noise, object_id=name, rng=rng)
            path = out / f"{name}__{site}.{fmt}"
            write_simulation(sim, path, sidecar=False if fmt == "ecsv" else True)
            side = path.with_name(path.name + ".truth.json")
            side.unlink(missing_ok=True)  # the truth lives in truth.ecsv, not beside the data
        truth_rows.append(_truth_row(name, "campaign", state, h_mag, albedo, n_nights_total))
    # two files broken on purpose
    bad = out / "KRN-011__lanternbay.ecsv"
    lines = bad.read_text().splitlines()
    body = [i for i, ln in enumerate(lines) if ln and not ln.startswith("#")]
    row = body[40]
    fields = lines[row].split(" ")
    fields[1] = "n/a?"
    lines[row] = " ".join(fields)
    bad.write_text("\n".join(lines) + "\n")
    trunc = out / "KRN-012__orrin.fits"
    data = gzip.compress(trunc.read_bytes(), mtime=0)
    (out / "KRN-012__orrin.fits.gz").write_bytes(data[: len(data) // 2])
    trunc.unlink()


def make_sparse(rng, truth_rows, n_objects=240):
    from astropy.table import Table, vstack

    out = HERE / "sparse"
    shutil.rmtree(out, ignore_errors=True)
    out.mkdir()
    tables, orbits = [], []
    for k in range(n_objects):
        name = f"SVS-{k + 1:04d}"
        u = rng.random()
        rotation = "PA" if u < 0.92 else ("SAM" if u < 0.97 else "LAM")
        ratio = 1 + rng.gamma(2.0, 0.12)
        axes = (ratio, 1 + 0.5 * (ratio - 1) * rng.random(), 1.0)
        axes = tuple(sorted(axes, reverse=True))
        if rotation == "PA":
            spec = float(np.exp(rng.uniform(np.log(2.2), np.log(40.0))))
        else:
            spec = (float(np.exp(rng.uniform(np.log(30), np.log(200)))), float(rng.uniform(0.3, 0.8)))
        state = _state(rotation, spec, axes, rng, epoch=START_JD_UTC)
        elements = opposition_elements(START_JD_UTC, a_au=rng.uniform(2.2, 3.2), e=rng.uniform(0.02, 0.25),
                                       i_deg=rng.uniform(0, 25), node_deg=rng.uniform(0, 360),
                                       peri_deg=rng.uniform(0, 360), days_before=rng.uniform(0, 120))
        plan = SparseSurvey(start_jd_utc=START_JD_UTC + rng.uniform(0, 10), span_d=330.0,
                            n_nights=int(rng.integers(50, 90)), points_per_night=2, band="r")
        h_mag = rng.uniform(13.5, 17.5)
        albedo = float(np.exp(rng.normal(np.log(0.15), 0.35)))
        sim = simulate_lightcurve(state, axes, plan, elements, h_mag=h_mag,
                                  trend=brightness.PhaseTrend(kind="hg", g=float(rng.uniform(0.05, 0.35))),
                                  noise=NoiseModel(sigma_mag=float(rng.uniform(0.02, 0.06))), object_id=name, rng=rng)
        lc = sim.lightcurve
        tables.append(Table({
            "object": np.full(lc.n_points, name), "mjd": np.round(np.asarray(lc.t_obs) - 2400000.5, 6),
            "mag": np.round(np.asarray(lc.mag), 4), "mag_err": np.round(np.asarray(lc.err), 4),
            "filter": np.asarray(lc.band), "rh": np.round(np.asarray(lc.r_au), 5),
            "delta": np.round(np.asarray(lc.delta_au), 5), "alpha": np.round(np.asarray(lc.phase_deg), 3),
        }))
        truth_rows.append(_truth_row(name, "sparse", state, h_mag, albedo, plan.n_nights))
        orbits.append((name, elements))
    table = vstack(tables)
    text = "\n".join(["# Sparrowhawk Valley Survey (invented): sparse r-band photometry, apparent magnitudes",
                      "# columns: object, mjd (UTC), mag, mag_err, filter, rh (au), delta (au), alpha (deg)"])
    import io

    buf = io.StringIO()
    table.write(buf, format="ascii.csv")
    (out / "svs_sample.csv.gz").write_bytes(gzip.compress((text + "\n" + buf.getvalue()).encode(), mtime=0))
    write_sparse_orbits(orbits, out / "svs_orbits.csv")


def write_sparse_orbits(orbits, path) -> None:
    """The survey objects' (invented) two-body elements, a plain table ``--orbits`` reads.

    Full precision (17 significant digits): the geometry ``--orbits`` computes from this file is
    the one the photometry was simulated with.
    """
    lines = ["# Sparrowhawk Valley Survey (invented): osculating two-body elements of the sample's objects",
             "# a_au (au), e, i_deg/node_deg/peri_deg/m_deg (deg, ecliptic J2000), epoch_jd (JD TDB)",
             "object,a_au,e,i_deg,node_deg,peri_deg,m_deg,epoch_jd"]
    for name, el in orbits:
        vals = (el.a_au, el.e, el.i_deg, el.node_deg, el.peri_deg, el.mean_anomaly_deg, el.epoch_jd)
        lines.append(name + "," + ",".join(repr(float(v)) for v in vals))
    Path(path).write_text("\n".join(lines) + "\n")


#: Census tumblers: P_psi / P_phi of their (invented) SAM states.
CENSUS_PSI_OVER_PHI = 5.0


def make_census_only(seed: int = 0) -> None:
    """Rewrite only the census (the campaign and the sparse sample stay as they are)."""
    make_census(np.random.default_rng([SEED, seed]))


def make_census(rng, n=300, log10_mu_q_true=11.3, age_gyr=4.5):
    """An earlier census of verdicts (invented) whose tumblers follow a known rigidity.

    Each object is NPA with probability 0.85 where the Burns & Safronov (1973)
    damping time with mu Q = 10**log10_mu_q_true Pa, rho = 2000 kg m^-3 and
    K3^2 = 0.03 exceeds the age, falling off smoothly (0.3 dex) below it, with
    2% misclassified either way.
    """
    from tumble.results import empty_row, write_results

    out = HERE / "census"
    shutil.rmtree(out, ignore_errors=True)
    out.mkdir()
    rows = []
    mu_q = 10**log10_mu_q_true
    for k in range(n):
        d_km = float(np.exp(rng.uniform(np.log(0.15), np.log(30.0))))
        p_h = float(np.exp(rng.uniform(np.log(2.0), np.log(400.0))))
        omega = 2 * np.pi / (p_h * 3600)
        tau_gyr = mu_q / (2000 * 0.03 * (d_km * 500) ** 2 * omega**3) / (3.15576e16)
        x = np.log10(tau_gyr / age_gyr) / 0.3
        p_npa = 0.02 + (0.85 - 0.02) / (1 + np.exp(-x))
        npa = rng.random() < p_npa
        row = empty_row(f"KRN-C{k + 1:03d}")
        # a tumbler's verdict carries P_psi and P_phi (its spin rate for damping is 2 pi / <|omega|>,
        # docs/damping.md): P_phi near the drawn spin period and P_psi a few times longer (SAM)
        row.update(rotation="NPA" if npa else "PA", mode="SAM" if npa else "",
                   period_h=np.nan if npa else p_h, p1_h=p_h, n_points=int(rng.integers(200, 2000)))
        if npa:
            row.update(p_phi_h=p_h, p_psi_h=CENSUS_PSI_OVER_PHI * p_h)
        row["diameter_km"] = d_km
        rows.append(row)
    write_results(rows, out / "krn_census.ecsv", extra_columns=["diameter_km"])
    return {"log10_mu_q_true": log10_mu_q_true, "age_gyr": age_gyr}


def main():
    from astropy.table import Table

    rng = np.random.default_rng(SEED)
    truth_rows: list[dict] = []
    make_campaign(rng, truth_rows)
    make_sparse(rng, truth_rows)
    census = make_census(rng)
    truth = Table(rows=truth_rows)
    truth.meta["scenario"] = "invented: Kestrel Ridge Network campaign and Sparrowhawk Valley Survey"
    truth.meta["census"] = census
    truth.meta["seed"] = SEED
    truth.write(HERE / "truth.ecsv", format="ascii.ecsv", overwrite=True)
    n_npa = sum(r["rotation"] == "NPA" for r in truth_rows)
    print(f"wrote {len(truth_rows)} objects ({n_npa} NPA) and a census of verdicts into {HERE}")


if __name__ == "__main__":
    import sys

    make_census_only() if sys.argv[1:] == ["--census-only"] else main()
