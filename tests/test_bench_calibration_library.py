"""The calibration library of the classifier benchmark (benchmarks/library): population, rendering,
scoring and the calibration map, against outside references."""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))

from library import calibration, population, render, routes, scoring  # noqa: E402


@pytest.fixture(scope="module")
def small_population():
    # one object of every recipe
    return population.generate_population(seed=7, scale=1e-6)


# ---------------------------------------------------------------------------
# Population


def test_recipes_cover_the_population_the_issue_asks_for():
    # issue 14: at least 600 objects, at least 200 PA, at least a third numerically integrated
    total = sum(r.count for r in population.RECIPES)
    pa = sum(r.count for r in population.RECIPES if population.TRUTH_CLASS[r.rotation] == "PA")
    assert total >= 600 and pa >= 200
    assert population.NUMERIC_FRACTION > 1 / 3
    plans = {r.plan for r in population.RECIPES}
    assert {"dense", "sparse", "close", "dense-short"} <= plans
    assert {"flat", "noise", "slow-PA", "PA", "NPA"} <= {r.rotation for r in population.RECIPES}


def test_population_is_reproducible_and_round_trips(small_population):
    again = population.generate_population(seed=7, scale=1e-6)
    assert [s.to_dict() for s in again] == [s.to_dict() for s in small_population]
    for s in small_population:
        assert population.spec_from_dict(s.to_dict()) == s
        assert s.split == population.split_of(s.object_id)
    # another seed draws other objects under the same ids
    other = population.generate_population(seed=8, scale=1e-6)
    assert [s.seed for s in other] != [s.seed for s in small_population]


def test_split_is_about_half():
    ids = [f"X-{k}" for k in range(2000)]
    n_cal = sum(population.split_of(i) == "calibration" for i in ids)
    # binomial(2000, 1/2): 4 sigma is 89 (common practice)
    assert abs(n_cal - 1000) < 90


def test_drawn_ranges_stay_within_the_issue(small_population):
    rng = np.random.default_rng(3)
    for _ in range(30):
        p = population.draw_dense_plan(rng)
        assert 5 <= p.n_nights <= 20 and 5.0 <= p.span_d <= 40.0 and 2.0 <= p.hours_per_night <= 8.0
        assert 2.0 <= p.cadence_min <= 10.0
        b = population.draw_body(rng, numeric=True)
        assert 0.55 <= b.b_over_a <= 0.95 and 0.6 <= b.c_over_b <= 0.95
        axes = b.axes
        assert axes[0] >= axes[1] >= axes[2]
        r = population.draw_npa_rotation(rng, b, "closed")
        assert 5.0 <= r.p_psi_h <= 300.0 and 2.0 <= r.p_phi_h <= 1500.0 and r.mode in ("SAM", "LAM")
    sparse = [s for s in small_population if s.plan_kind == "sparse"]
    assert sparse and all(s.plan.n_apparitions >= 2 for s in sparse)


def test_apparitions_are_counted_by_gaps():
    # nights 0-30 and 400-430: two apparitions (gap > 60 d); one night alone is one
    assert population.count_apparitions(np.r_[np.arange(30), 400 + np.arange(30)]) == 2
    assert population.count_apparitions([5.0]) == 1
    assert population.count_apparitions([]) == 0


# ---------------------------------------------------------------------------
# Rendering


def test_close_approach_orbit_has_the_asked_distance_and_phase_angle():
    from tumble import geometry

    t_ca = 2461200.5
    el = render.close_approach_elements(t_ca, 0.02, 70.0, 4.0, 30.0, 50.0)
    geo = geometry.observing_geometry(np.array([t_ca - 0.5, t_ca, t_ca + 0.5]), el)
    # phase angle = angle Sun-asteroid-observer (common practice); at 0.02 au from an observer 1 au from
    # the Sun the parallax shifts it by at most asin(0.02) = 1.15 deg; light time is < 1 min here
    assert geo.delta_au[1] == pytest.approx(0.02, rel=0.01)
    assert abs(geo.phase_deg[1] - 70.0) < 1.3
    # closest approach: the distance grows on both sides (relative speed 4 km/s = 0.0023 au/d)
    assert geo.delta_au[0] > geo.delta_au[1] < geo.delta_au[2]
    # the geometry changes within a night: several degrees in half a day at this distance
    assert abs(geo.phase_deg[2] - geo.phase_deg[0]) > 2.0


def test_numeric_attitude_matches_the_closed_form():
    # two independent solutions of Euler's equations (DOP853 and the closed form of Kaasalainen 2001)
    from tumble.dynamics import RotationState

    st = RotationState.from_periods(0.6, 0.85, 30.0, 11.0, "LAM", 40.0, 20.0, 10.0, 20.0, 2461000.0)
    t = 2461000.0 + np.linspace(0.0, 10.0, 200)
    a = render.closed_form_attitude(st, t)
    b = render.numeric_attitude(st, t)
    assert np.max(np.abs(a - b)) < 1e-6


def test_render_caches_and_reloads(tmp_path, small_population):
    spec = next(s for s in small_population if s.category == "dense-npa")
    obj = render.load_or_render(spec, tmp_path)
    again = render.load_rendered(tmp_path, spec.object_id)
    assert again is not None and again.spec == spec
    np.testing.assert_allclose(again.lightcurve.mag, obj.lightcurve.mag)
    np.testing.assert_allclose(again.model_mag, obj.model_mag)
    import json

    assert json.dumps(again.truth.to_dict()) == json.dumps(obj.truth.to_dict())  # NaN-aware comparison
    t = obj.truth
    assert t.truth_class == "NPA" and t.signature_mag == t.one_period_misfit_mag > 0
    assert t.n_points == obj.lightcurve.n_points


def test_signature_is_zero_for_a_periodic_curve_and_not_for_two_periods():
    # a one-period curve is fitted exactly by the one-period family; a sum of two incommensurate
    # sinusoids leaves the second one's rms, amplitude / sqrt(2) (Parseval; common practice)
    from tumble.photometry import LightCurve

    t = 2461000.0 + np.sort(np.concatenate([n + np.linspace(0, 0.3, 90) for n in range(10)]))
    one = 0.2 * np.cos(2 * np.pi * 3.1 * t) + 0.05 * np.cos(4 * np.pi * 3.1 * t)
    two = one + 0.03 * np.cos(2 * np.pi * 7.77 * t + 0.3)
    sess = np.floor(t - t[0]).astype(int)
    lc1 = LightCurve.from_arrays(t, one, np.full(t.size, 0.01), session=sess, time_scale="tdb",
                                 light_time_corrected=True)
    lc2 = LightCurve.from_arrays(t, two, np.full(t.size, 0.01), session=sess, time_scale="tdb",
                                 light_time_corrected=True)
    assert render.one_period_misfit_mag(lc1, [3.1]) < 1e-3
    # the zero points and the drift absorb only a little of a second period shorter than a night
    assert render.one_period_misfit_mag(lc2, [3.1]) == pytest.approx(0.03 / math.sqrt(2), rel=0.1)


# ---------------------------------------------------------------------------
# Routes and scoring


def test_decision_statistics_read_every_field_generically():
    from dataclasses import dataclass

    @dataclass(frozen=True)
    class V:
        rotation: str
        p_npa: float
        new_field: float
        ranges: tuple

    out = routes.decision_statistics((V("PA", 0.1, 3.0, (1.0, 2.0)), V("NPA", 0.9, 4.0, ())))
    assert out["rotation"] == "PA" and out["new_field"] == 3.0 and out["ranges"] == [1.0, 2.0]
    assert out["ev.rotation"] == "NPA"

    class Record:
        def to_dict(self):
            return {"verdict": {"rotation": "undecided", "npa_limit_mag": 0.02}, "scan": {"n": 5}}

    out = routes.decision_statistics(Record())
    assert out["rotation"] == "undecided" and out["npa_limit_mag"] == 0.02 and out["scan.n"] == 5


def test_clopper_pearson_matches_scipy_exact_interval():
    # scipy.stats.binomtest(...).proportion_ci(method="exact") is the Clopper-Pearson interval
    for k, n in ((0, 36), (3, 50), (17, 20), (20, 20)):
        ref = stats.binomtest(k, n).proportion_ci(0.95, method="exact")
        lo, hi = scoring.clopper_pearson(k, n)
        assert lo == pytest.approx(ref.low, abs=1e-9) and hi == pytest.approx(ref.high, abs=1e-9)
    # one-sided upper limit at k = 0 has the closed form 1 - alpha^(1/n) (Clopper & Pearson 1934):
    # 0/36 -> 0.080 at 95 %, the figure quoted in issue 14
    assert scoring.clopper_pearson(0, 36, one_sided=True)[1] == pytest.approx(1 - 0.05 ** (1 / 36), rel=1e-9)


def test_expected_calibration_error_of_calibrated_and_overconfident_predictions():
    rng = np.random.default_rng(11)
    p = rng.uniform(0, 1, 20000)
    y = rng.random(20000) < p
    # calibrated by construction: ECE is only the binomial scatter of the bins (~0.01 here)
    assert scoring.expected_calibration_error(p, y) < 0.02
    # pushing every prediction to 0 or 1 makes the ECE the mean |p - 1/2| error: 0.25 (common practice)
    assert scoring.expected_calibration_error(np.round(p), y) == pytest.approx(0.25, abs=0.02)


def _rows_from_logistic(rng, n, a, b):
    x = rng.normal(0.0, 3.0, n)
    y = rng.random(n) < 1.0 / (1.0 + np.exp(-(a + b * x)))
    rows = []
    for xi, yi in zip(x, y):
        lnb = math.copysign(math.expm1(abs(xi)), xi)  # so that the ln B feature sign(x) log(1+|x|) is xi
        rows.append({"status": "ok", "true.split": "calibration", "true.truth_class": "NPA" if yi else "PA",
                     "ln_bayes_factor": lnb, "route": "test"})
    return rows


def test_fit_calibration_recovers_a_known_logistic_model():
    # maximum-likelihood logistic regression is consistent (Cox 1958): data drawn from
    # P = 1/(1 + exp(-(a + b x))) give back a, b within their standard errors
    rng = np.random.default_rng(5)
    rows = _rows_from_logistic(rng, 4000, -0.7, 1.3)
    feats = (calibration.FEATURES[0],)
    cmap = calibration.fit_calibration(rows, features=feats, ridge=0.0)
    b = cmap.coefficients[0] / cmap.scale[0]
    a = cmap.intercept - b * cmap.centre[0]
    assert a == pytest.approx(-0.7, abs=0.15) and b == pytest.approx(1.3, abs=0.15)
    p = calibration.apply_calibration(cmap, rows[:5], features=feats)
    x = np.array([calibration.feat_ln_b(r) for r in rows[:5]])
    np.testing.assert_allclose(p, 1 / (1 + np.exp(-(a + b * x))), rtol=1e-9)


def test_calibration_map_is_monotone_in_ln_b():
    # data where more evidence for NPA would mean less NPA: the bounded coefficient stays at zero
    rng = np.random.default_rng(6)
    rows = _rows_from_logistic(rng, 1000, 0.0, -1.0)
    cmap = calibration.fit_calibration(rows, features=(calibration.FEATURES[0],))
    assert cmap.coefficients[0] == pytest.approx(0.0, abs=1e-8)


def test_truth_is_detectable_tumbling_and_weak_tumblers_are_left_out():
    # the map's truth (calibration.truth_label): a tumbler whose signature is below the per-point noise
    # is neither NPA nor PA truth and must not enter the fit
    assert calibration.truth_label({"true.truth_class": "PA"}) == 0.0
    assert calibration.truth_label({"true.truth_class": "binary"}) == 0.0
    assert calibration.truth_label({"true.truth_class": "NPA", "true.signature_over_noise": 3.0}) == 1.0
    assert math.isnan(calibration.truth_label({"true.truth_class": "NPA", "true.signature_over_noise": 0.2}))
    rng = np.random.default_rng(9)
    rows = _rows_from_logistic(rng, 200, 0.0, 1.0)
    weak = [dict(r, **{"true.truth_class": "NPA", "true.signature_over_noise": 0.1}) for r in rows[:50]]
    cmap = calibration.fit_calibration(rows[50:] + weak, features=(calibration.FEATURES[0],))
    assert cmap.n_fit == 150 and "per-point noise" in cmap.truth


def test_calibration_json_round_trip(tmp_path):
    import json

    rng = np.random.default_rng(8)
    rows = _rows_from_logistic(rng, 300, 0.2, 0.8)
    cmap = calibration.fit_calibration(rows)
    path = tmp_path / "calibration.json"
    calibration.save_calibration(cmap, path)
    d = json.loads(path.read_text())
    np.testing.assert_allclose(calibration.apply_calibration(d, rows[:20]), calibration.apply_calibration(cmap, rows[:20]))
    assert d["features"][0] == calibration.LN_B_FEATURE and d["monotone"][0] is True


def test_report_scores_a_small_table(tmp_path):
    rows = []
    for k in range(20):
        rows.append({"object_id": f"a{k}", "status": "ok", "route": "t", "true.split": "heldout",
                     "true.truth_class": "PA", "true.plan_kind": "dense", "true.category": "dense-pa",
                     "true.period_h": 5.0, "rotation": "NPA" if k == 0 else "PA", "grade": "firm",
                     "period_h": 5.02 if k < 10 else 5.2, "p_npa": 0.05, "route_runtime_s": 1.0})
        rows.append({"object_id": f"b{k}", "status": "ok", "route": "t", "true.split": "heldout",
                     "true.truth_class": "NPA", "true.plan_kind": "dense", "true.category": "dense-npa",
                     "true.signature_over_noise": 5.0, "true.p_psi_h": 20.0, "true.p_phi_h": 8.0,
                     "rotation": "NPA" if k < 15 else "PA", "grade": "sound", "p_psi_h": 20.1, "p_phi_h": 8.0,
                     "p_npa": 0.8, "route_runtime_s": 1.0})
    fp = scoring.false_npa_table(rows)["dense"]
    assert (fp.k, fp.n) == (1, 20)
    rec = scoring.recall_table(rows)[("dense", 3.0, 10.0)]
    assert (rec.k, rec.n) == (15, 20)
    acc = scoring.period_accuracy(rows)
    # object a0 is called NPA: 19 PA verdicts, 9 of them with the period within 1 % (5.02 vs 5.0)
    assert (acc[("PA", "dense", 0.01)].k, acc[("PA", "dense", 0.01)].n) == (9, 19)
    assert acc[("NPA", "dense", 0.01)].k == 15
    text = scoring.report_text(rows, figure_path=tmp_path / "rel.png")
    assert "expected calibration error" in text and (tmp_path / "rel.png").stat().st_size > 0


def test_npa_light_curve_periods_match_the_frequency_combinations():
    # a tumbler's light curve holds only n1 f_phi + n2 f_psi (Kaasalainen 2001, A&A 376, 302);
    # for P_psi = 20 h, P_phi = 8 h: f_phi + f_psi -> 5.714 h, f_phi -> 8 h
    row = {"true.p_psi_h": 20.0, "true.p_phi_h": 8.0, "p1_h": 1 / (1 / 8 + 1 / 20), "p2_h": 8.0}
    assert scoring.npa_lightcurve_match(row, 0.01)
    assert not scoring.npa_lightcurve_match({**row, "p2_h": 9.3}, 0.01)
    assert not scoring.npa_lightcurve_match({**row, "p2_h": float("nan")}, 0.01)


def test_library_binaries_are_a_class_of_their_own_with_events_at_the_orbital_period():
    # issue 20's ranges: P_orb 10-40 h, size ratio 0.2-0.5; new ids, so that the other objects keep
    # their seeds (each seed is a hash of the object's own id)
    binaries = population.generate_population(recipes=population.BINARY_RECIPES)
    assert len(binaries) == sum(r.count for r in population.BINARY_RECIPES) >= 40
    assert all(s.truth_class == "binary" and s.object_id.startswith("CAL-dense-binary-") for s in binaries)
    assert all(10.0 <= s.binary.p_orb_h <= 40.0 and 0.2 <= s.binary.size_ratio <= 0.5 for s in binaries)
    assert {"calibration", "heldout"} == {s.split for s in binaries}
    others = population.generate_population(recipes=tuple(r for r in population.RECIPES if r.rotation != "binary"))
    assert all(s.binary is None for s in others)
    assert population.spec_from_dict(binaries[0].to_dict()) == binaries[0]
    # a near edge-on binary: its rendered light curve has mutual events (the truth's noise-free depth,
    # from tumble.simulate.binary_event_factors, the two-sphere geometry of tests/test_mutual_events.py)
    spec = next(s for s in binaries if s.binary.edge_on)
    obj = render.render(spec)
    assert obj.truth.p_orb_h == spec.binary.p_orb_h and obj.truth.event_depth_mag > 0.02
    assert obj.truth.truth_class == "binary" and obj.truth.period_h == spec.rotation.p_psi_h
