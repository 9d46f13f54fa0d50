"""Jar-test review: overlay, apparent-solubility-shift fit, minima and flags.

Ground truth: synthetic jars generated from the core's own prediction (``wb.residual_curve`` with a known
``solubility_shift``) plus seeded log-normal scatter, so the value the fit must find is the one put in; the flags
are checked on cases built to show each symptom and on clean synthetic data where none may fire. The demo file's
ground truth is its generator (tests/reference/make_demo_jar_tests.py: Zn +0.6, Ni +0.4, carry-over in jar 8).
"""

import importlib.util
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import workbench as wb
from workbench.errors import InputError
from workbench.figures.jar_tests import fig_jar_tests
from workbench.scenario import demo_water
from workbench.treatment import calibration as cal
from workbench.treatment.jar_tests import demo_jar_tests_path, read_jar_tests

WATER = wb.Water(
    metals_mg_l={"Zn": 20.0, "Cu": 10.0, "Ni": 8.0},
    ph=6.0,
    sulfate_mg_l=400.0,
    sodium_mg_l=150.0,
    calcium_mg_l=40.0,
    alkalinity_mg_l_caco3=80.0,
    temperature_c=25.0,
)
PH = np.array([7.5, 8.0, 8.5, 9.0, 9.5, 10.0, 10.5, 11.0])


def synthetic(water, ph, *, shift=None, sigma=0.0, seed=0, carry=0.01, metals=None):
    """Tidy jar results from the core: dissolved = prediction x 10**N(0, sigma) (capped at the influent);
    total = dissolved + ``carry`` x the precipitated metal (a per-jar mapping or one share for all); lime dose =
    the core's titration dose for the jar's pH (so the dose-consistency flag stays silent on clean data)."""
    rng = np.random.default_rng(seed)
    curve = wb.residual_curve(water, ph, solubility_shift=shift)
    doses = [wb.dose_for_ph(water, "lime", float(p)) for p in ph]
    rows = []
    for k, p in enumerate(ph):
        jar = f"J{k + 1}"
        share = carry.get(jar, 0.01) if isinstance(carry, dict) else carry
        for metal in metals or list(water.metals_mg_l):
            influent = water.metals_mg_l[metal]
            d = min(curve[metal].iloc[k] * 10 ** rng.normal(0.0, sigma), influent)
            for fraction, v in (("dissolved", d), ("total", d + share * (influent - d))):
                rows.append((jar, float(p), doses[k], "lime", metal, fraction, v, False, np.nan))
    return pd.DataFrame(rows, columns=["jar", "pH", "dose_mg_l", "reagent", "metal", "fraction", "value_mg_l",
                                       "censored", "detection_limit_mg_l"])  # fmt: skip


def censor(tidy, metal, jars, limits):
    """Replace the metal's dissolved results in ``jars`` by "<DL" (value NaN, censored, the given limits)."""
    out = tidy.copy()
    for jar, dl in zip(jars, limits, strict=True):
        sel = (out["jar"] == jar) & (out["metal"] == metal) & (out["fraction"] == "dissolved")
        out.loc[sel, ["value_mg_l", "censored", "detection_limit_mg_l"]] = [np.nan, True, dl]
    return out


# ---------------------------------------------------------------------------------------------- overlay
def test_overlay_puts_the_core_prediction_beside_each_result():
    tidy = synthetic(WATER, PH, shift={"Zn": 0.5}, sigma=0.1, seed=3, metals=["Zn"])
    ov = cal.overlay(tidy, WATER)
    core = wb.residual_curve(WATER, PH)["Zn"].to_numpy()  # ground truth: the core at the same pH
    diss = ov[ov["fraction"] == "dissolved"]
    np.testing.assert_allclose(diss["predicted_mg_l"], core, rtol=1e-9)
    np.testing.assert_allclose(diss["log_residual"], np.log10(diss["value_mg_l"] / core), rtol=0, atol=1e-12)
    assert diss["solid_predicted"].all() and (diss["influent_mg_l"] == 20.0).all()
    # a below-detection result has no residual, only its largest possible value
    cens = cal.overlay(censor(tidy, "Zn", ["J1"], [0.01]), WATER).iloc[0]
    assert np.isnan(cens["log_residual"])
    assert cens["log_residual_max"] == pytest.approx(np.log10(0.01 / core[0]), abs=1e-12)


def test_overlay_at_the_jar_temperature():
    tidy = synthetic(WATER, PH[:3], metals=["Zn"]).assign(temperature_c=12.0)
    cold = wb.residual_curve(wb.Water(**{**WATER.__dict__, "temperature_c": 12.0}), PH[:3])["Zn"].to_numpy()
    ov = cal.overlay(tidy, WATER)
    np.testing.assert_allclose(ov.loc[ov["fraction"] == "dissolved", "predicted_mg_l"], cold, rtol=1e-9)
    with pytest.raises(InputError, match="temperature_c of jar 'J1'"):
        cal.overlay(tidy.assign(temperature_c=80.0), WATER)


# ---------------------------------------------------------------------------------------------- fit
def test_recovers_a_known_shift_within_its_interval():
    # synthetic jars from the core with shift +0.8 and 0.1-log scatter (seeded): the fit finds +0.8 back
    tidy = synthetic(WATER, PH, shift={"Zn": 0.8}, sigma=0.1, seed=11, metals=["Zn"])
    fit = cal.fit_solubility_shift(tidy, WATER, "Zn")
    assert fit.low <= 0.8 <= fit.high, fit
    assert 0.05 < fit.high - fit.low < 0.35  # an informative interval, neither collapsed nor vacuous
    assert fit.n_used == 8 and fit.n_censored == 0 and fit.n_no_information == 0
    assert 0.05 < fit.scale_log < 0.2  # the 0.1-log scatter put in
    # without scatter the shift is recovered to the fit's tolerance and the interval closes up
    exact = cal.fit_solubility_shift(synthetic(WATER, PH, shift={"Zn": 0.8}, metals=["Zn"]), WATER, "Zn")
    assert exact.shift == pytest.approx(0.8, abs=2e-3) and exact.high - exact.low < 0.01


def test_a_robust_loss_resists_one_wild_jar():
    tidy = synthetic(WATER, PH, shift={"Zn": 0.8}, sigma=0.05, seed=5, metals=["Zn"])
    sel = (tidy["jar"] == "J4") & (tidy["fraction"] == "dissolved")
    tidy.loc[sel, "value_mg_l"] *= 100.0  # one result two decades off (a contaminated sample)
    robust = cal.fit_solubility_shift(tidy, WATER, "Zn")
    plain = cal.fit_solubility_shift(tidy, WATER, "Zn", loss="linear")
    assert abs(robust.shift - 0.8) < 0.1 < abs(plain.shift - 0.8)


def test_censored_points_do_not_drag_the_fit():
    tidy = synthetic(WATER, PH, shift={"Zn": 0.8}, sigma=0.1, seed=11, metals=["Zn"])
    truth = wb.residual_curve(WATER, PH, solubility_shift={"Zn": 0.8})["Zn"].to_numpy()
    low3 = ["J4", "J5", "J6"]  # pH 9-10, the bottom of the Zn curve: reported "<DL" with DL = 5x the truth
    limits = 5.0 * truth[3:6]
    with_censored = cal.fit_solubility_shift(censor(tidy, "Zn", low3, limits), WATER, "Zn")
    dropped = cal.fit_solubility_shift(tidy[~tidy["jar"].isin(low3)], WATER, "Zn")
    as_numbers = tidy.copy()  # the mistake the censoring avoids: "<DL" read as the number DL
    for jar, dl in zip(low3, limits, strict=True):
        as_numbers.loc[(as_numbers["jar"] == jar) & (as_numbers["fraction"] == "dissolved"), "value_mg_l"] = (
            dl
        )
    naive = cal.fit_solubility_shift(as_numbers, WATER, "Zn")
    assert with_censored.shift == pytest.approx(dropped.shift, abs=0.01)
    assert naive.shift - dropped.shift > 0.1  # DL-as-number drags the curve up; the limits do not
    assert with_censored.n_censored == 3 and with_censored.n_used == 8
    assert with_censored.low <= 0.8 <= with_censored.high


def test_a_limit_below_the_prediction_pulls_the_fit_down():
    # "<DL" is an upper bound: when the fitted curve would pass above it, the bound pulls the curve down
    tidy = synthetic(WATER, PH, shift={"Zn": 0.8}, sigma=0.1, seed=11, metals=["Zn"])
    truth = wb.residual_curve(WATER, PH, solubility_shift={"Zn": 0.8})["Zn"].to_numpy()
    bound = cal.fit_solubility_shift(censor(tidy, "Zn", ["J5", "J6"], 0.3 * truth[4:6]), WATER, "Zn")
    free = cal.fit_solubility_shift(tidy[~tidy["jar"].isin(["J5", "J6"])], WATER, "Zn")
    assert bound.shift < free.shift - 0.05


def test_all_below_detection_bounds_the_shift_from_above():
    ph = PH[2:6]
    limits = wb.residual_curve(WATER, ph, solubility_shift={"Zn": 0.3})["Zn"].to_numpy()
    tidy = censor(synthetic(WATER, ph, metals=["Zn"]), "Zn", ["J1", "J2", "J3", "J4"], limits)
    fit = cal.fit_solubility_shift(tidy, WATER, "Zn")
    # ground truth: every limit equals the prediction at +0.3, so the largest shift the results allow is +0.3
    assert np.isnan(fit.shift) and fit.low == -np.inf
    assert fit.high == pytest.approx(0.3, abs=0.01)
    assert cal.calibrated_shift({"Zn": fit}) == {} and cal.calibrated_shift({"Zn": fit}, bound="high") == {
        "Zn": fit.high
    }


def test_jars_where_the_metal_stays_dissolved_carry_no_information():
    ph = np.array([6.0, 6.5, 9.0, 9.5, 10.0, 10.5])
    tidy = synthetic(WATER, ph, shift={"Ni": 0.5}, sigma=0.05, seed=2, metals=["Ni"])
    shifted = wb.residual_curve(WATER, ph, solubility_shift={"Ni": 0.5})["Ni"].to_numpy()
    dissolved = int((shifted >= 8.0 * (1 - 1e-6)).sum())  # ground truth: the core keeps all 8 mg/L dissolved
    assert dissolved == 2
    fit = cal.fit_solubility_shift(tidy, WATER, "Ni")
    assert fit.n_no_information == dissolved and fit.n_used == 4
    assert "J1 (pH 6), J2 (pH 6.5)" in fit.notes[0] and "no information" in fit.notes[0]
    assert fit.low <= 0.5 <= fit.high
    # a metal dissolved at every jar: nothing to fit, and the fit says so
    none = cal.fit_solubility_shift(tidy[tidy["jar"].isin(["J1", "J2"])], WATER, "Ni")
    assert np.isnan(none.shift) and none.n_used == 0 and "not determined" in none.notes[-1]


def test_fit_refuses_bad_arguments():
    tidy = synthetic(WATER, PH[:3], metals=["Zn"])
    for kwargs, field in [
        (dict(metal="Hg"), "metal"),
        (dict(metal="Zn", loss="l2"), "loss"),
        (dict(metal="Zn", f_scale=0), "f_scale"),
        (dict(metal="Zn", confidence=1.5), "confidence"),
    ]:
        with pytest.raises(InputError) as err:
            cal.fit_solubility_shift(tidy, WATER, **kwargs)
        assert err.value.field == field
    with pytest.raises(InputError, match="no column 'censored'"):
        cal.fit_solubility_shift(tidy.drop(columns="censored"), WATER, "Zn")
    with pytest.raises(InputError, match="one result per jar, metal and fraction"):
        cal.fit_solubility_shift(pd.concat([tidy, tidy.iloc[:1]]), WATER, "Zn")
    with pytest.raises(InputError, match="one measured pH per jar"):
        cal.overlay(tidy.assign(pH=[8.0, 8.1] + [8.5] * (len(tidy) - 2)), WATER)
    with pytest.raises(InputError, match="bound"):
        cal.calibrated_shift({}, bound="middle")


# ---------------------------------------------------------------------------------------------- into the design
def test_calibrated_shift_feeds_the_core_and_the_setpoint_design():
    tidy = synthetic(WATER, PH, shift={"Zn": 0.8}, sigma=0.1, seed=11, metals=["Zn"])
    fits = cal.fit_solubility_shifts(tidy, WATER)
    shift = cal.calibrated_shift(fits)
    assert shift == {"Zn": fits["Zn"].shift}
    grid = np.round(np.arange(8.0, 11.01, 0.1), 6)
    curve = cal.calibrated_curve(WATER, grid, fits)
    np.testing.assert_allclose(curve, wb.residual_curve(WATER, grid, solubility_shift=shift), rtol=1e-12)
    assert curve.attrs["solubility_shift"] == shift
    assert (cal.calibrated_curve(WATER, grid, fits, bound="high")["Zn"] > curve["Zn"]).all()
    # the setpoint design takes the same mapping: its compared curve is the calibrated one
    limits = wb.permit_limits({"Zn": 0.6}, source="test permit")
    theory = wb.design_setpoint(WATER, limits, ph_range=(8.0, 11.0), step=0.1)
    calibrated = wb.design_setpoint(WATER, limits, ph_range=(8.0, 11.0), step=0.1, solubility_shift=shift)
    np.testing.assert_allclose(calibrated.curve["Zn"], curve["Zn"], rtol=1e-9)
    width = sum(hi - lo for lo, hi in calibrated.windows)
    assert 0 < width < sum(hi - lo for lo, hi in theory.windows)  # a more soluble Zn narrows the window


# ---------------------------------------------------------------------------------------------- minima and flags
def test_clean_synthetic_data_raise_no_flag():
    tidy = synthetic(WATER, PH, sigma=0.08, seed=4)
    assert cal.flag_jars(tidy, WATER).empty
    minima = cal.compare_minima(tidy, WATER)
    assert minima["agree"].tolist() == [True, True, True]


def test_complexant_flag_fires_when_a_metal_stays_far_above_prediction():
    tidy = synthetic(WATER, PH, sigma=0.08, seed=4)
    cu = (tidy["metal"] == "Cu") & (tidy["fraction"] == "dissolved")
    tidy.loc[cu, "value_mg_l"] = np.minimum(tidy.loc[cu, "value_mg_l"] * 30.0, 10.0)  # complexed copper
    flags = cal.flag_jars(tidy, WATER)
    row = flags[flags["flag"] == "complexant_suspected"]
    assert row["metal"].tolist() == ["Cu"]
    # every jar where 10x the prediction stays under the 10 mg/L influent is far above (ground truth: the core)
    pred = wb.residual_curve(WATER, PH)["Cu"].to_numpy()
    expected = [f"J{k + 1}" for k in range(len(PH)) if pred[k] * 10 <= 10.0]
    assert row["jars"].iloc[0] == ", ".join(expected)
    assert "complexant" in row["reason"].iloc[0] and "times the prediction" in row["reason"].iloc[0]


def test_carry_over_flag_fires_on_the_badly_settled_jar_only():
    tidy = synthetic(WATER, PH, sigma=0.08, seed=4, carry={"J6": 0.3})
    flags = cal.flag_jars(tidy, WATER)
    assert flags[["flag", "metal", "jars"]].values.tolist() == [["solids_carry_over", "", "J6"]]
    assert "3 of 3 metals" in flags["reason"].iloc[0] and "filter" in flags["reason"].iloc[0]
    # a jar with a little more carry-over than the rest (5 % of the precipitate) is not suspect
    assert cal.flag_jars(synthetic(WATER, PH, sigma=0.08, seed=4, carry={"J6": 0.05}), WATER).empty


def test_minimum_flag_fires_when_the_observed_minimum_is_elsewhere():
    tidy = synthetic(WATER, PH, sigma=0.0, metals=["Zn"])
    zn = tidy["fraction"] == "dissolved"
    tidy.loc[zn, "value_mg_l"] = 0.05 * 10 ** np.abs(tidy.loc[zn, "pH"] - 8.0)  # a V with its bottom at pH 8
    total = tidy["fraction"] == "total"  # settled well: total 2 % above dissolved in every jar
    tidy.loc[total, "value_mg_l"] = tidy.loc[zn, "value_mg_l"].to_numpy() * 1.02
    minima = cal.compare_minima(tidy, WATER)
    assert minima.at["Zn", "ph_min_observed"] == 8.0 and minima.at["Zn", "agree"] is False
    pred = wb.residual_curve(WATER, np.round(np.arange(7.5, 11.001, 0.02), 6))["Zn"]
    assert minima.at["Zn", "ph_min_predicted"] == pytest.approx(pred.idxmin(), abs=1e-9)  # the core's minimum
    flags = cal.flag_jars(tidy, WATER)
    assert flags["flag"].tolist() == ["minimum_ph_differs"] and flags["jars"].iloc[0] == "J2"


# ---------------------------------------------------------------------------------------------- the demo
def _demo_generator():
    path = Path(__file__).resolve().parent / "reference" / "make_demo_jar_tests.py"
    spec = importlib.util.spec_from_file_location("make_demo_jar_tests", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_demo_file_is_what_its_generator_writes():
    assert demo_jar_tests_path().read_text(encoding="utf-8") == _demo_generator().make()


def test_demo_series_reads_overlays_fits_and_flags():
    water = demo_water()
    tidy = read_jar_tests(demo_jar_tests_path())
    assert tidy["jar"].nunique() == 10 and set(tidy["metal"]) == set(water.metals_mg_l)
    assert tidy["censored"].sum() > 0 and "INVENTED" in demo_jar_tests_path().read_text().splitlines()[0]
    ov = cal.overlay(tidy, water)
    assert ov["predicted_mg_l"].notna().all()
    fits = cal.fit_solubility_shifts(tidy, water)
    invented = _demo_generator().SHIFT  # ground truth of the invented series
    for metal, fit in fits.items():
        if metal == "Fe":  # every Fe result is below detection: only an upper bound
            assert np.isnan(fit.shift) and fit.high > 0
            continue
        assert fit.low <= invented.get(metal, 0.0) <= fit.high, fit
    flags = cal.flag_jars(tidy, water)
    assert flags[["flag", "jars"]].values.tolist() == [["solids_carry_over", "8"]]
    fig = fig_jar_tests(tidy, wb.residual_curve(water, np.arange(6.0, 11.51, 0.05)),
                        calibrated_curve=cal.calibrated_curve(water, np.arange(6.0, 11.51, 0.05), fits))  # fmt: skip
    names = [t.name for t in fig.data]
    assert "Zn predicted" in names and f"Zn calibrated ({fits['Zn'].shift:+.2f} log)" in names
    assert "Fe dissolved, below detection" in names


def test_figure_draws_each_result_as_measured():
    tidy = censor(
        synthetic(WATER, PH, shift={"Zn": 0.5}, sigma=0.1, seed=1, metals=["Zn"]), "Zn", ["J5"], [0.02]
    )
    curve = wb.residual_curve(WATER, PH)
    fig = fig_jar_tests(tidy, curve)
    by_name = {t.name: t for t in fig.data}
    line = by_name["Zn predicted"]
    np.testing.assert_allclose(line.y, curve["Zn"], rtol=1e-12)
    diss = by_name["Zn dissolved"]
    expected = tidy[(tidy["fraction"] == "dissolved") & ~tidy["censored"]]
    np.testing.assert_allclose(diss.y, expected["value_mg_l"], rtol=1e-12)
    assert diss.marker.symbol == "circle" and by_name["Zn total"].marker.symbol == "circle-open"
    below = by_name["Zn dissolved, below detection"]
    assert below.marker.symbol == "triangle-down" and list(below.x) == [9.5] and list(below.y) == [0.02]
    assert fig.layout.yaxis.type == "log" and fig.layout.yaxis.title.text == "metal (mg/L)"
    assert line.line.color == "#0072B2"  # Zn's palette colour


def test_ph_off_dose_flag_fires_on_a_misread_jar_and_is_silent_on_the_demo():
    # the demo jars' doses are the model's own titration doses (tests/reference/make_demo_jar_tests.py): no flag;
    # a jar whose pH reads 1.5 units above what its dose gives is flagged with the reason
    from workbench.scenario import demo_water
    from workbench.treatment.jar_tests import demo_jar_tests_path

    tidy = wb.read_jar_tests(demo_jar_tests_path())
    water = demo_water()
    assert "ph_off_dose" not in set(wb.flag_jars(tidy, water)["flag"])
    misread = tidy.copy()
    misread.loc[misread["jar"] == "4", "pH"] += 1.5
    flags = wb.flag_jars(misread, water)
    hit = flags[flags["flag"] == "ph_off_dose"]
    assert hit["jars"].tolist() == ["4"]
    assert "titration" in hit["reason"].iloc[0]
