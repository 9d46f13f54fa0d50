"""Hydroxide-precipitation workbench: pH setpoints, reagent dose, sludge and jar-test review for metal-bearing
wastewater.

Public API (``import workbench as wb``)::

    wb.Water(metals_mg_l={...}, temperature_c=25.0, ph=..., sulfate_mg_l=..., ...)
    wb.residual_curve(water, ph)        # dissolved metal vs pH, mg/L
    wb.minimum_solubility(water)        # each metal's minimum-solubility pH and controlling solid
    wb.speciate(water, ph)              # one equilibrium: species, solids, saturation indices

Results are theoretical equilibrium: confirm by jar tests; the local permit and a licensed engineer govern.
"""

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
