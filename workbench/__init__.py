"""Hydroxide-precipitation workbench: pH setpoints, reagent dose, sludge and jar-test review for metal-bearing
wastewater.

Results are theoretical equilibrium: confirm by jar tests; the local permit and a licensed engineer govern.

Public API (``import workbench as wb``; stable: notebooks, the command line and outside checks call it)::

    wb.Water(metals_mg_l={...}, temperature_c=25, ph=None, sulfate_mg_l, chloride_mg_l, sodium_mg_l,
             calcium_mg_l, magnesium_mg_l, alkalinity_mg_l_caco3, ammonia_mg_l_n, edta_mg_l, citrate_mg_l,
             fluoride_mg_l, tss_mg_l, acidity_mg_l_caco3=None, name)
        an influent, validated on construction (acidity: measured hot peroxide net acidity, may be negative)
    wb.ion_balance(water)
        IonBalance: cations against anions of the analysis (meq/L, %), and whether it meets the acceptance rule
    wb.residual_curve(water, ph, *, solids="fresh", activity="davies", solubility_shift=None)
        DataFrame, index pH, a column per metal: dissolved mg/L
    wb.minimum_solubility(water, *, ph_range=(4, 13.5), solids, activity, solubility_shift)
        DataFrame per metal: ph_min, residual_mg_l, solid, ph_low_2x, ph_high_2x, influent_mg_l, note
    wb.speciate(water, ph=None, ...)
        SpeciationResult: species, solids, saturation, ionic strength, strong base that holds the pH
    wb.available_limit_sets(), wb.load_limits(name)
        example discharge-limit sets (40 CFR 433.15, 433.17, 413.14): metal, basis, limit_mg_l, source, origin
    wb.permit_limits({metal: mg_l}, *, basis="permit", source=...), wb.combine_limits(*tables)
        the user's own limits; later tables win per metal and basis
    wb.design_setpoint(water, limits, margin=0.5, *, ph_range, step, rule, basis, effluent_tss_mg_l, solids,
                       solubility_shift, two_stage, samples, seed, default_uncertainty, progress)
        SetpointDesign: windows, setpoint_ph, rule, table (headroom per metal), edges (limiting metal), stages
        (two-stage scheme or None), curve, targets, compared, notes, cautions, warnings, band
    wb.design_scenario(scenario, *, samples=None, step=None, progress=None)
        the design of a scenario (design_setpoint with its influent, limits, options and Monte Carlo settings):
        what the figure pack, the setpoint panel and the command line call
    wb.uncertainty_band(water, ph, *, samples, seed, quantiles, default_uncertainty, uncertainty_scale, limits,
                        setpoint_ph, progress)
        UncertaintyBand: nominal, lower, median, upper curves; probability of meeting each limit
    wb.raw_water_acidity(water)
        unmeasured strong acid/base that closes the analysis (metals as analysed) at its pH or its measured
        acidity; mineral, total and hot peroxide acidity (as CaCO3); ion balance; supersaturated solids
    wb.dose_curve(water, reagent, dose_mg_l, *, purity=None, extra_calcium_chloride_mg_l=0, solids,
                  reactor="closed", pco2_atm=None)
        titration curve: dose_mg_l, pH, dissolved metals, fluoride_mg_l, sludge_mg_l, calcium_mg_l; a closed
        reactor or one open to the air (attrs say which)
    wb.dose_for_ph(water, reagent, target_ph, *, purity=None, ..., reactor), wb.reagent_ceiling_ph(water, reagent)
        dose of product as sold for a target pH (bracketed root; a float carrying reactor, warnings); the
        reagent's own pH ceiling in this water
    wb.sludge_at_dose(water, reagent, dose_mg_l, *, flow_m3_d, solids_fraction),
    wb.daily_table(water, reagent, target_ph, flow_m3_d), wb.fluoride_at_setpoint(...)
        sludge per solid (mg/L, kg/d, wet m3/d); daily reagent and sludge table; residual fluoride
    wb.read_jar_tests(path_or_buffer, *, decimal=".", detection_limits_mg_l=None)
        jar-test file (CSV or .xlsx, our own format: README) -> tidy DataFrame
    wb.overlay(tidy, water), wb.fit_solubility_shifts(tidy, water), wb.calibrated_shift(fits),
    wb.flag_jars(tidy, water)
        jar tests against the model: overlay, fitted apparent solubility shift per metal (ShiftFit with its
        interval), the shift dict for solubility_shift=, flags with reasons
    wb.read_scenario(path), wb.save_scenario(scenario, path), wb.Scenario
        scenario files (our own TOML schema: workbench.scenario)

Errors: ``wb.InputError`` (a ``ValueError``: field, value, what is allowed), ``wb.ModelRangeError`` (beyond the
activity model's range), ``wb.ConvergenceError``, ``wb.DataError``.
Names are imported on first use (``wb.Water`` loads the treatment layer then), so that ``import workbench``
itself is quick; ``from workbench import Water`` works as usual.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING

#: public name -> the module that defines it
_SOURCES = {
    "ConvergenceError": "workbench.errors",
    "DataError": "workbench.errors",
    "InputError": "workbench.errors",
    "ModelRangeError": "workbench.errors",
    "Scenario": "workbench.scenario",
    "design_scenario": "workbench.scenario",
    "read_scenario": "workbench.scenario",
    "save_scenario": "workbench.scenario",
    "ShiftFit": "workbench.treatment.calibration",
    "calibrated_shift": "workbench.treatment.calibration",
    "fit_solubility_shifts": "workbench.treatment.calibration",
    "flag_jars": "workbench.treatment.calibration",
    "overlay": "workbench.treatment.calibration",
    "daily_table": "workbench.treatment.dose",
    "dose_curve": "workbench.treatment.dose",
    "dose_for_ph": "workbench.treatment.dose",
    "fluoride_at_setpoint": "workbench.treatment.dose",
    "raw_water_acidity": "workbench.treatment.dose",
    "IonBalance": "workbench.treatment.influent",
    "ion_balance": "workbench.treatment.influent",
    "reagent_ceiling_ph": "workbench.treatment.dose",
    "sludge_at_dose": "workbench.treatment.dose",
    "read_jar_tests": "workbench.treatment.jar_tests",
    "available_limit_sets": "workbench.treatment.limits",
    "combine_limits": "workbench.treatment.limits",
    "load_limits": "workbench.treatment.limits",
    "permit_limits": "workbench.treatment.limits",
    "SetpointDesign": "workbench.treatment.setpoint",
    "design_setpoint": "workbench.treatment.setpoint",
    "SpeciationResult": "workbench.treatment.solubility",
    "minimum_solubility": "workbench.treatment.solubility",
    "residual_curve": "workbench.treatment.solubility",
    "speciate": "workbench.treatment.solubility",
    "UncertaintyBand": "workbench.treatment.uncertainty",
    "uncertainty_band": "workbench.treatment.uncertainty",
    "Water": "workbench.treatment.water",
}


def __getattr__(name: str):
    source = _SOURCES.get(name)
    if source is None:
        raise AttributeError(f"module 'workbench' has no attribute {name!r}")
    value = getattr(importlib.import_module(source), name)
    globals()[name] = value  # later look-ups do not come here
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


if TYPE_CHECKING:  # for type checkers and editors: the same names, imported eagerly
    from workbench.errors import ConvergenceError, DataError, InputError, ModelRangeError
    from workbench.scenario import Scenario, design_scenario, read_scenario, save_scenario
    from workbench.treatment.calibration import (
        ShiftFit,
        calibrated_shift,
        fit_solubility_shifts,
        flag_jars,
        overlay,
    )
    from workbench.treatment.dose import (
        daily_table,
        dose_curve,
        dose_for_ph,
        fluoride_at_setpoint,
        raw_water_acidity,
        reagent_ceiling_ph,
        sludge_at_dose,
    )
    from workbench.treatment.influent import IonBalance, ion_balance
    from workbench.treatment.jar_tests import read_jar_tests
    from workbench.treatment.limits import available_limit_sets, combine_limits, load_limits, permit_limits
    from workbench.treatment.setpoint import SetpointDesign, design_setpoint
    from workbench.treatment.solubility import SpeciationResult, minimum_solubility, residual_curve, speciate
    from workbench.treatment.uncertainty import UncertaintyBand, uncertainty_band
    from workbench.treatment.water import Water

__all__ = [
    "ConvergenceError",
    "DataError",
    "InputError",
    "IonBalance",
    "ModelRangeError",
    "Scenario",
    "SetpointDesign",
    "ShiftFit",
    "SpeciationResult",
    "UncertaintyBand",
    "Water",
    "available_limit_sets",
    "calibrated_shift",
    "daily_table",
    "combine_limits",
    "design_scenario",
    "design_setpoint",
    "dose_curve",
    "dose_for_ph",
    "fit_solubility_shifts",
    "flag_jars",
    "fluoride_at_setpoint",
    "ion_balance",
    "load_limits",
    "minimum_solubility",
    "overlay",
    "permit_limits",
    "raw_water_acidity",
    "read_jar_tests",
    "read_scenario",
    "reagent_ceiling_ph",
    "save_scenario",
    "sludge_at_dose",
    "residual_curve",
    "speciate",
    "uncertainty_band",
]
