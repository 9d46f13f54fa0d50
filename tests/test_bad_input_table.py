"""Bad input to every public entry point and file reader, and the error it gives.

Every row is a test: the call raises ``workbench.InputError`` (a ``ValueError``; ``ModelRangeError`` is a
subclass) whose ``field`` is the one named here and whose message says what is allowed (the text quoted here is
part of it). DEVELOPERS.md points here for the table of bad inputs; a test checks that it lists exactly the
rows tested.

| Entry point | Bad input | Error: `field`: what is allowed (part of the message) |
|---|---|---|
| `wb.Water` | `metals_mg_l=[('Zn', 1.0)]` (not a mapping) | `metals_mg_l`: a mapping of metal symbol to mg/L |
| `wb.Water` | `metals_mg_l={'Zn': 'ten'}` (not a number) | `metals_mg_l['Zn']`: a number between 0 and 20000 mg/L |
| `wb.Water` | `metals_mg_l={'Zn': nan}` | `metals_mg_l['Zn']`: allowed 0 to 20000 mg/L |
| `wb.Water` | `metals_mg_l={'Zn': inf}` | `metals_mg_l['Zn']`: allowed 0 to 20000 mg/L |
| `wb.Water` | `metals_mg_l={'Zn': -1.0}` | `metals_mg_l['Zn']`: allowed 0 to 20000 mg/L |
| `wb.Water` | `metals_mg_l={'Hg': 1.0}` (unknown metal) | `metals_mg_l`: known metals are Cu, Ni, Zn |
| `wb.Water` | `metals_mg_l={'zinc': 1.0}` (a name, not the key) | `metals_mg_l`: known metals are Cu, Ni, Zn |
| `wb.Water` | `metals_mg_l={'Cr(VI)': 1.0}` | `metals_mg_l['Cr(VI)']`: must be reduced to Cr(III) |
| `wb.Water` | `temperature_c='25'` (text) | `temperature_c`: a number between 5 and 50 |
| `wb.Water` | `temperature_c=nan` | `temperature_c`: allowed 5 to 50 |
| `wb.Water` | `temperature_c=60` | `temperature_c`: allowed 5 to 50 |
| `wb.Water` | `ph=inf` | `ph`: allowed 0 to 14 |
| `wb.Water` | `sulfate_mg_l=-5` | `sulfate_mg_l`: allowed 0 to 50000 mg/L |
| `wb.Water` | `calcium_mg_l=nan` | `calcium_mg_l`: allowed 0 to 50000 mg/L |
| `wb.Water` | `alkalinity_mg_l_caco3=200, ph=3` (inconsistent pair) | `alkalinity_mg_l_caco3`: inconsistent with pH 3 |
| `wb.Water` | `acidity_mg_l_caco3='high'` (text) | `acidity_mg_l_caco3`: a number between -50000 and 50000 |
| `wb.Water` | `acidity_mg_l_caco3=nan` | `acidity_mg_l_caco3`: allowed -50000 to 50000 mg/L as CaCO3 |
| `wb.Water` | `name=5` | `name`: a text label is required |
| `wb.residual_curve` | `ph='seven'` (text) | `ph`: 0 to 14 |
| `wb.residual_curve` | `ph=True` (not a pH) | `ph`: 0 to 14 |
| `wb.residual_curve` | `ph=[7, nan]` | `ph`: allowed 0 to 14 (finite numbers) |
| `wb.residual_curve` | `ph=[inf]` | `ph`: allowed 0 to 14 (finite numbers) |
| `wb.residual_curve` | `ph=[]` | `ph`: one pH value or a 1-D sequence of them |
| `wb.residual_curve` | `ph=[7, 15]` | `ph`: allowed 0 to 14 |
| `wb.residual_curve` | `ph=-0.5` | `ph`: allowed 0 to 14 |
| `wb.residual_curve` | `solids='crystal'` | `solids`: allowed fresh, aged, none |
| `wb.residual_curve` | `activity='debye'` | `activity`: allowed davies, ideal |
| `wb.residual_curve` | `water={'Zn': 1.0}` (not a Water) | `water`: a workbench Water is required |
| `wb.speciate` | `ph=[7, 8]` (two values) | `ph`: speciate takes one pH |
| `wb.speciate` | `ph='seven'` (text) | `ph`: 0 to 14 |
| `wb.speciate` | `ph=nan` | `ph`: allowed 0 to 14 (finite numbers) |
| `wb.speciate` | no `ph`, Water without a measured pH | `ph`: give a pH, or a Water with a measured pH |
| `wb.speciate` | `water=None` | `water`: a workbench Water is required |
| `wb.minimum_solubility` | `ph_range=(9, 8)` (reversed) | `ph_range`: allowed 0 <= low < high <= 14 |
| `wb.minimum_solubility` | `ph_range=(7, 7.2)` (narrower than 0.5) | `ph_range`: at least 0.5 apart |
| `wb.minimum_solubility` | `ph_range=(0, 15)` | `ph_range`: allowed 0 <= low < high <= 14 |
| `wb.minimum_solubility` | `ph_range=(nan, 9)` | `ph_range`: allowed 0 <= low < high <= 14 |
| `wb.minimum_solubility` | `ph_range='high'` (not a pair) | `ph_range`: a pair (low, high) of pH values |
| `wb.design_setpoint` | `limits={'Zn': 1.0}` (a dict) | `limits`: a limit table (load_limits / permit_limits) |
| `wb.design_setpoint` | empty limit table | `limits`: at least one limit is required |
| `wb.design_setpoint` | a limit of -1 mg/L | `limits row 0 (Zn) limit_mg_l`: a positive number of mg/L |
| `wb.design_setpoint` | a limit of NaN | `limits row 0 (Zn) limit_mg_l`: a positive number of mg/L |
| `wb.design_setpoint` | a permit limit for a metal not in the water | `limits`: which is not in the water |
| `wb.design_setpoint` | `margin=0` | `margin`: allowed (0, 1] |
| `wb.design_setpoint` | `margin=1.5` | `margin`: allowed (0, 1] |
| `wb.design_setpoint` | `margin=nan` | `margin`: a number in (0, 1] |
| `wb.design_setpoint` | `margin='0.5'` (text) | `margin`: a number in (0, 1] |
| `wb.design_setpoint` | `rule='best'` | `rule`: allowed widest_centre, max_headroom |
| `wb.design_setpoint` | `effluent_tss_mg_l=-1` | `effluent_tss_mg_l`: allowed 0 to 1000 mg/L |
| `wb.design_setpoint` | `effluent_tss_mg_l=nan` | `effluent_tss_mg_l`: allowed 0 to 1000 mg/L |
| `wb.design_setpoint` | `effluent_tss_mg_l='10'` (text) | `effluent_tss_mg_l`: allowed 0 to 1000 mg/L |
| `wb.design_setpoint` | `water='Zn 10 mg/L'` (not a Water) | `water`: a workbench Water is required |
| `wb.load_limits` | `'40cfr999'` (unknown set) | `limit set`: known sets are 40cfr433.15 |
| `wb.permit_limits` | `{}` (empty) | `permit limits`: a non-empty mapping of metal to mg/L |
| `wb.permit_limits` | `{'Zn': -1.0}` | `permit limits['Zn']`: a positive number of mg/L |
| `wb.permit_limits` | `{'Zn': nan}` | `permit limits['Zn']`: a positive number of mg/L |
| `wb.permit_limits` | `basis='weekly'` | `basis`: allowed daily_max, monthly_avg |
| `wb.uncertainty_band` | `samples=0` | `samples`: an integer from 1 to 20000 |
| `wb.uncertainty_band` | `samples=2.5` | `samples`: an integer from 1 to 20000 |
| `wb.uncertainty_band` | `seed=-1` | `seed`: an integer from 0 to |
| `wb.uncertainty_band` | `quantiles=(0.5, 0.05, 0.95)` | `quantiles`: three increasing fractions in [0, 1] |
| `wb.uncertainty_band` | `quantiles=(0.05, 0.95)` (two) | `quantiles`: three increasing fractions in [0, 1] |
| `wb.uncertainty_band` | `quantiles=('low', 0.5, 0.95)` (text) | `quantiles`: three increasing fractions in [0, 1] |
| `wb.read_scenario` | missing file | `scenario file`: an existing .toml file is required |
| `wb.read_scenario` | not UTF-8 (a cp1252 byte) | `scenario file`: UTF-8 text is required |
| `wb.read_scenario` | truncated TOML (cut inside a table header) | `scenario file`: valid TOML is required |
| `wb.read_scenario` | unknown key `design.margn` | `design.margn`: unknown key; known keys are margin |
| `wb.read_scenario` | huge file (over 1 MB) | `scenario file`: files up to 1000000 bytes are accepted |
| `wb.read_scenario` | `version = 2` | `version`: this workbench reads scenario version 1 |
| `wb.read_jar_tests` | missing file | `jar-test file`: an existing file is required |
| `wb.read_jar_tests` | truncated (last row cut) | `cut.csv, row 4, column 'ph'`: a value is required |
| `wb.read_jar_tests` | truncated (inside quotes) | `quote.csv, row 4`: CSV text is expected |
| `wb.read_jar_tests` | not UTF-8 (cp1252 byte) | `cp1252.csv, row 3, column 'reagent'`: text in UTF-8 is expected |
| `wb.read_jar_tests` | `encoding='klingon'` (unknown) | `encoding`: a text encoding Python knows |
| `wb.read_jar_tests` | huge file (over 20 MB) | `huge.csv`: jar-test files up to 20 MB are accepted |
| `wb.dose_curve` | `reagent='bleach'` (unknown) | `reagent`: known reagents are lime, quicklime |
| `wb.dose_curve` | `dose_mg_l=[-5]` | `dose_mg_l`: allowed 0 to 200000 mg/L |
| `wb.dose_curve` | `dose_mg_l=[nan]` | `dose_mg_l`: allowed 0 to 200000 mg/L |
| `wb.dose_curve` | `purity=0` | `purity`: greater than 0 and at most 1 |
| `wb.dose_curve` | `purity=1.5` | `purity`: greater than 0 and at most 1 |
| `wb.dose_curve` | Water without a measured pH | `ph`: a Water with a measured pH is required |
| `wb.dose_for_ph` | `reagent='bleach'` (unknown) | `reagent`: known reagents are lime, quicklime |
| `wb.dose_for_ph` | `purity=0` | `purity`: greater than 0 and at most 1 |
| `wb.dose_for_ph` | `purity=-0.5` | `purity`: greater than 0 and at most 1 |
| `wb.dose_for_ph` | `target_ph=nan` | `target_ph`: a pH between 0 and 14 |
| `wb.dose_for_ph` | `target_ph=5` (below pH 7) | `target_ph`: allowed above the water's pH without reagent |
| `wb.dose_for_ph` | `target_ph=13.9`, lime | `target_ph`: its ceiling here |
| `wb.residual_curve` | `ph=` 3 million points | `ph`: at most 15000 pH values per call |
| `wb.dose_curve` | `dose_mg_l='100'` (text) | `dose_mg_l`: a number or a 1-D sequence of numbers (mg/L) |
| `wb.dose_curve` | `dose_mg_l=[True]` | `dose_mg_l`: a number or a 1-D sequence of numbers (mg/L) |
| `wb.dose_curve` | `dose_mg_l=` 20,000 doses | `dose_mg_l`: at most 15000 doses per call |
| `wb.uncertainty_band` | `samples=20000` on 281 pH points | `samples`: at most 3000000 samples x pH points per band |
| `wb.uncertainty_band` | `progress=5` (not a function) | `progress`: a function progress(done, total), or None |
| `wb.uncertainty_band` | `limits={'Zn': 0}` | `limits['Zn']`: a positive number of mg/L |
| `wb.uncertainty_band` | `limits={'Zn': nan}` | `limits['Zn']`: a positive number of mg/L |
| `wb.uncertainty_band` | `limits={'Hg': 1.0}` (not in the water) | `limits`: a limit for a metal of this water |
| `wb.uncertainty_band` | `limits=` without `setpoint_ph` | `setpoint_ph`: a pH is required with limits |
| `wb.design_setpoint` | `progress=5` (not a function) | `progress`: a function progress(done, total), or None |
| `wb.permit_limits` | `{'Hg': 1.0}` (unknown metal) | `permit limits`: known metals are Cu, Ni, Zn |
| `wb.permit_limits` | `{'zn': 1.0}` (wrong case) | `permit limits`: write the metal key 'Zn' |
| `wb.permit_limits` | `{'Cr(VI)': 1.0}` | `permit limits['Cr(VI)']`: must be reduced to Cr(III) |
| `wb.permit_limits` | `{'Zn2+': 1.0}` (an ion) | `permit limits`: write the metal key 'Zn' |
| `wb.fit_solubility_shifts` | a jar table of 0 rows | `jar tests`: at least one jar result |
| `wb.overlay` | `value_mg_l=-0.5` in a row | `jar tests row 0 (jar '1') value_mg_l`: a result above 0 mg/L |
| `wb.overlay` | `pH=15` in a row | `jar tests row 0 (jar '1') pH`: a measured pH from 0 to 14 |
| `wb.flag_jars` | `far_log=-1` | `far_log`: a number of log10 units above 0 |
| `wb.flag_jars` | `far_log=nan` | `far_log`: a number of log10 units above 0 |
| `wb.flag_jars` | `carryover_ratio=0.5` | `carryover_ratio`: a ratio of total to dissolved of 1 or more |
| `wb.flag_jars` | `uncaptured_fraction=1.5` | `uncaptured_fraction`: a fraction from 0 to 1 |
| `wb.flag_jars` | `ph_tolerance=-0.1` | `ph_tolerance`: pH units above 0 |
| `wb.calibrated_shift` | `fits={'Zn': 0.5}` (not fits) | `fits`: the mapping fit_solubility_shifts returns |
| `wb.read_jar_tests` | .xlsx, 2 million shared strings | `bomb.xlsx: xl/sharedStrings.xml`: (limit: shared strings) |
| `wb.read_jar_tests` | .xlsx, 500x2**20 declared | `bomb.xlsx: xl/worksheets/sheet1.xml`: limit: declared dimensions) |
| `wb.read_jar_tests` | .xlsx, a cell in row 1,048,576 | `bomb.xlsx: xl/worksheets/sheet1.xml`: (limit: cells) |
| `wb.read_jar_tests` | .xlsx, 190 MB of spaces unpacked | `bomb.xlsx`: (limit: unpacked size) |
| `wb.read_scenario` | TOML nested 100,000 deep | `scenario file`: valid TOML nested a few levels deep is required |
| `wb.save_scenario` | a target `notes.csv` (not .toml) | `scenario file`: a file name ending in .toml |
| `export_figure_pack` | a folder holding other files | `out_dir`: a new or empty folder, or one an earlier pack wrote |
| `export_figure_pack` | a pack file changed since it was written | `file`: changed since an earlier pack wrote it |
| `export_figure_pack` | `keep=` the scenario, in the way | `out_dir`: does not replace its own input |
| `export_figure_pack` | a folder under a file (unwritable) | `out_dir`: can create and write to |
| `export_figure_pack` | `progress=5` (not a function) | `progress`: a function progress(done, total), or None |
| `wb.dose_curve` | `reactor='aerated'` (unknown) | `reactor`: allowed closed (no gas exchange) or open |
| `wb.dose_for_ph` | `pco2_atm=2`, open reactor | `pco2_atm`: allowed greater than 0 and at most 1 atm |
| `wb.dose_for_ph` | `pco2_atm=0.01`, closed reactor | `pco2_atm`: applies to reactor='open' only |

A Water with an empty metal mapping (``metals_mg_l={}``: pure water, or major ions only) is valid, not refused.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
from pathlib import Path

import hostile_files as hostile
import numpy as np
import pandas as pd
import pytest

import workbench as wb
from workbench.export import export_figure_pack
from workbench.scenario import MAX_FILE_BYTES as MAX_SCENARIO_BYTES
from workbench.scenario import demo_scenario_path
from workbench.treatment import jar_tests

WATER = wb.Water(metals_mg_l={"Zn": 10.0}, ph=7.0, sodium_mg_l=100.0, sulfate_mg_l=200.0)
LIMITS = wb.permit_limits({"Zn": 1.0})
JARS = "jar,reagent,dose_mg_l,ph,Zn dissolved (mg/L)\n1,lime,100,8.5,0.5\n2,lime,200,9.5,0.1\n"


def _limit(value) -> object:
    table = LIMITS.copy()
    table.loc[0, "limit_mg_l"] = value
    return table


def _file(folder: Path, name: str, data: bytes) -> Path:
    path = folder / name
    path.write_bytes(data)
    return path


def _scenario(folder: Path, name: str, text: str) -> Path:
    return _file(folder, name, text.encode("utf-8"))


DEMO_SCENARIO = demo_scenario_path().read_text(encoding="utf-8")


def _jars(**row0) -> pd.DataFrame:
    """The small jar table, read; ``row0`` replaces values in its first row (a table changed by hand)."""
    tidy = wb.read_jar_tests(JARS.encode("utf-8"), file_format="csv")
    for column, value in row0.items():
        tidy.loc[0, column] = value
    return tidy


def _pack_scenario():
    return wb.read_scenario(demo_scenario_path())


def _changed_pack(folder: Path) -> Path:
    """A folder an earlier pack wrote (its manifest) whose summary.html was edited since."""
    _file(folder, "summary.html", b"edited by hand")
    files = {"summary.html": hashlib.sha256(b"as the pack wrote it").hexdigest()}
    manifest = {"workbench_pack": 1, "files": files}
    _file(folder, "pack_manifest.json", json.dumps(manifest).encode("utf-8"))
    return folder

# (entry point, bad input as written in the table, call(tmp_path), field named, what is allowed: a fragment)
ROWS = [
    # ------------------------------------------------------------------ the influent
    (
        "wb.Water",
        "`metals_mg_l=[('Zn', 1.0)]` (not a mapping)",
        lambda tmp: wb.Water(metals_mg_l=[("Zn", 1.0)]),
        "metals_mg_l",
        "a mapping of metal symbol to mg/L",
    ),
    (
        "wb.Water",
        "`metals_mg_l={'Zn': 'ten'}` (not a number)",
        lambda tmp: wb.Water(metals_mg_l={"Zn": "ten"}),
        "metals_mg_l['Zn']",
        "a number between 0 and 20000 mg/L",
    ),
    (
        "wb.Water",
        "`metals_mg_l={'Zn': nan}`",
        lambda tmp: wb.Water(metals_mg_l={"Zn": math.nan}),
        "metals_mg_l['Zn']",
        "allowed 0 to 20000 mg/L",
    ),
    (
        "wb.Water",
        "`metals_mg_l={'Zn': inf}`",
        lambda tmp: wb.Water(metals_mg_l={"Zn": math.inf}),
        "metals_mg_l['Zn']",
        "allowed 0 to 20000 mg/L",
    ),
    (
        "wb.Water",
        "`metals_mg_l={'Zn': -1.0}`",
        lambda tmp: wb.Water(metals_mg_l={"Zn": -1.0}),
        "metals_mg_l['Zn']",
        "allowed 0 to 20000 mg/L",
    ),
    (
        "wb.Water",
        "`metals_mg_l={'Hg': 1.0}` (unknown metal)",
        lambda tmp: wb.Water(metals_mg_l={"Hg": 1.0}),
        "metals_mg_l",
        "known metals are Cu, Ni, Zn",
    ),
    (
        "wb.Water",
        "`metals_mg_l={'zinc': 1.0}` (a name, not the key)",
        lambda tmp: wb.Water(metals_mg_l={"zinc": 1.0}),
        "metals_mg_l",
        "known metals are Cu, Ni, Zn",
    ),
    (
        "wb.Water",
        "`metals_mg_l={'Cr(VI)': 1.0}`",
        lambda tmp: wb.Water(metals_mg_l={"Cr(VI)": 1.0}),
        "metals_mg_l['Cr(VI)']",
        "must be reduced to Cr(III)",
    ),
    (
        "wb.Water",
        "`temperature_c='25'` (text)",
        lambda tmp: wb.Water(temperature_c="25"),
        "temperature_c",
        "a number between 5 and 50",
    ),
    (
        "wb.Water",
        "`temperature_c=nan`",
        lambda tmp: wb.Water(temperature_c=math.nan),
        "temperature_c",
        "allowed 5 to 50",
    ),
    (
        "wb.Water",
        "`temperature_c=60`",
        lambda tmp: wb.Water(temperature_c=60.0),
        "temperature_c",
        "allowed 5 to 50",
    ),
    ("wb.Water", "`ph=inf`", lambda tmp: wb.Water(ph=math.inf), "ph", "allowed 0 to 14"),
    (
        "wb.Water",
        "`sulfate_mg_l=-5`",
        lambda tmp: wb.Water(sulfate_mg_l=-5.0),
        "sulfate_mg_l",
        "allowed 0 to 50000 mg/L",
    ),
    (
        "wb.Water",
        "`calcium_mg_l=nan`",
        lambda tmp: wb.Water(calcium_mg_l=math.nan),
        "calcium_mg_l",
        "allowed 0 to 50000 mg/L",
    ),
    (
        "wb.Water",
        "`alkalinity_mg_l_caco3=200, ph=3` (inconsistent pair)",
        lambda tmp: wb.Water(alkalinity_mg_l_caco3=200.0, ph=3.0),
        "alkalinity_mg_l_caco3",
        "inconsistent with pH 3",
    ),
    (
        "wb.Water",
        "`acidity_mg_l_caco3='high'` (text)",
        lambda tmp: wb.Water(acidity_mg_l_caco3="high", ph=3.0),
        "acidity_mg_l_caco3",
        "a number between -50000 and 50000",
    ),
    (
        "wb.Water",
        "`acidity_mg_l_caco3=nan`",
        lambda tmp: wb.Water(acidity_mg_l_caco3=math.nan, ph=3.0),
        "acidity_mg_l_caco3",
        "allowed -50000 to 50000 mg/L as CaCO3",
    ),
    ("wb.Water", "`name=5`", lambda tmp: wb.Water(name=5), "name", "a text label is required"),
    # ------------------------------------------------------------------ residual curve
    (
        "wb.residual_curve",
        "`ph='seven'` (text)",
        lambda tmp: wb.residual_curve(WATER, "seven"),
        "ph",
        "0 to 14",
    ),
    (
        "wb.residual_curve",
        "`ph=True` (not a pH)",
        lambda tmp: wb.residual_curve(WATER, True),
        "ph",
        "0 to 14",
    ),
    (
        "wb.residual_curve",
        "`ph=[7, nan]`",
        lambda tmp: wb.residual_curve(WATER, [7.0, math.nan]),
        "ph",
        "allowed 0 to 14 (finite numbers)",
    ),
    (
        "wb.residual_curve",
        "`ph=[inf]`",
        lambda tmp: wb.residual_curve(WATER, [math.inf]),
        "ph",
        "allowed 0 to 14 (finite numbers)",
    ),
    (
        "wb.residual_curve",
        "`ph=[]`",
        lambda tmp: wb.residual_curve(WATER, []),
        "ph",
        "one pH value or a 1-D sequence of them",
    ),
    (
        "wb.residual_curve",
        "`ph=[7, 15]`",
        lambda tmp: wb.residual_curve(WATER, [7.0, 15.0]),
        "ph",
        "allowed 0 to 14",
    ),
    ("wb.residual_curve", "`ph=-0.5`", lambda tmp: wb.residual_curve(WATER, -0.5), "ph", "allowed 0 to 14"),
    (
        "wb.residual_curve",
        "`solids='crystal'`",
        lambda tmp: wb.residual_curve(WATER, 7.0, solids="crystal"),
        "solids",
        "allowed fresh, aged, none",
    ),
    (
        "wb.residual_curve",
        "`activity='debye'`",
        lambda tmp: wb.residual_curve(WATER, 7.0, activity="debye"),
        "activity",
        "allowed davies, ideal",
    ),
    (
        "wb.residual_curve",
        "`water={'Zn': 1.0}` (not a Water)",
        lambda tmp: wb.residual_curve({"Zn": 1.0}, 7.0),
        "water",
        "a workbench Water is required",
    ),
    # ------------------------------------------------------------------ speciation
    (
        "wb.speciate",
        "`ph=[7, 8]` (two values)",
        lambda tmp: wb.speciate(WATER, [7.0, 8.0]),
        "ph",
        "speciate takes one pH",
    ),
    ("wb.speciate", "`ph='seven'` (text)", lambda tmp: wb.speciate(WATER, "seven"), "ph", "0 to 14"),
    (
        "wb.speciate",
        "`ph=nan`",
        lambda tmp: wb.speciate(WATER, math.nan),
        "ph",
        "allowed 0 to 14 (finite numbers)",
    ),
    (
        "wb.speciate",
        "no `ph`, Water without a measured pH",
        lambda tmp: wb.speciate(wb.Water(metals_mg_l={"Zn": 1.0})),
        "ph",
        "give a pH, or a Water with a measured pH",
    ),
    (
        "wb.speciate",
        "`water=None`",
        lambda tmp: wb.speciate(None, 7.0),
        "water",
        "a workbench Water is required",
    ),
    # ------------------------------------------------------------------ minimum solubility
    (
        "wb.minimum_solubility",
        "`ph_range=(9, 8)` (reversed)",
        lambda tmp: wb.minimum_solubility(WATER, ph_range=(9.0, 8.0)),
        "ph_range",
        "allowed 0 <= low < high <= 14",
    ),
    (
        "wb.minimum_solubility",
        "`ph_range=(7, 7.2)` (narrower than 0.5)",
        lambda tmp: wb.minimum_solubility(WATER, ph_range=(7.0, 7.2)),
        "ph_range",
        "at least 0.5 apart",
    ),
    (
        "wb.minimum_solubility",
        "`ph_range=(0, 15)`",
        lambda tmp: wb.minimum_solubility(WATER, ph_range=(0.0, 15.0)),
        "ph_range",
        "allowed 0 <= low < high <= 14",
    ),
    (
        "wb.minimum_solubility",
        "`ph_range=(nan, 9)`",
        lambda tmp: wb.minimum_solubility(WATER, ph_range=(math.nan, 9.0)),
        "ph_range",
        "allowed 0 <= low < high <= 14",
    ),
    (
        "wb.minimum_solubility",
        "`ph_range='high'` (not a pair)",
        lambda tmp: wb.minimum_solubility(WATER, ph_range="high"),
        "ph_range",
        "a pair (low, high) of pH values",
    ),
    # ------------------------------------------------------------------ setpoint design
    (
        "wb.design_setpoint",
        "`limits={'Zn': 1.0}` (a dict)",
        lambda tmp: wb.design_setpoint(WATER, {"Zn": 1.0}),
        "limits",
        "a limit table (load_limits / permit_limits)",
    ),
    (
        "wb.design_setpoint",
        "empty limit table",
        lambda tmp: wb.design_setpoint(WATER, LIMITS.iloc[0:0]),
        "limits",
        "at least one limit is required",
    ),
    (
        "wb.design_setpoint",
        "a limit of -1 mg/L",
        lambda tmp: wb.design_setpoint(WATER, _limit(-1.0)),
        "limits row 0 (Zn) limit_mg_l",
        "a positive number of mg/L",
    ),
    (
        "wb.design_setpoint",
        "a limit of NaN",
        lambda tmp: wb.design_setpoint(WATER, _limit(math.nan)),
        "limits row 0 (Zn) limit_mg_l",
        "a positive number of mg/L",
    ),
    (
        "wb.design_setpoint",
        "a permit limit for a metal not in the water",
        lambda tmp: wb.design_setpoint(WATER, wb.permit_limits({"Cu": 1.0})),
        "limits",
        "which is not in the water",
    ),
    (
        "wb.design_setpoint",
        "`margin=0`",
        lambda tmp: wb.design_setpoint(WATER, LIMITS, margin=0.0),
        "margin",
        "allowed (0, 1]",
    ),
    (
        "wb.design_setpoint",
        "`margin=1.5`",
        lambda tmp: wb.design_setpoint(WATER, LIMITS, margin=1.5),
        "margin",
        "allowed (0, 1]",
    ),
    (
        "wb.design_setpoint",
        "`margin=nan`",
        lambda tmp: wb.design_setpoint(WATER, LIMITS, margin=math.nan),
        "margin",
        "a number in (0, 1]",
    ),
    (
        "wb.design_setpoint",
        "`margin='0.5'` (text)",
        lambda tmp: wb.design_setpoint(WATER, LIMITS, margin="0.5"),
        "margin",
        "a number in (0, 1]",
    ),
    (
        "wb.design_setpoint",
        "`rule='best'`",
        lambda tmp: wb.design_setpoint(WATER, LIMITS, rule="best"),
        "rule",
        "allowed widest_centre, max_headroom",
    ),
    (
        "wb.design_setpoint",
        "`effluent_tss_mg_l=-1`",
        lambda tmp: wb.design_setpoint(WATER, LIMITS, effluent_tss_mg_l=-1.0),
        "effluent_tss_mg_l",
        "allowed 0 to 1000 mg/L",
    ),
    (
        "wb.design_setpoint",
        "`effluent_tss_mg_l=nan`",
        lambda tmp: wb.design_setpoint(WATER, LIMITS, effluent_tss_mg_l=math.nan),
        "effluent_tss_mg_l",
        "allowed 0 to 1000 mg/L",
    ),
    (
        "wb.design_setpoint",
        "`effluent_tss_mg_l='10'` (text)",
        lambda tmp: wb.design_setpoint(WATER, LIMITS, effluent_tss_mg_l="10"),
        "effluent_tss_mg_l",
        "allowed 0 to 1000 mg/L",
    ),
    (
        "wb.design_setpoint",
        "`water='Zn 10 mg/L'` (not a Water)",
        lambda tmp: wb.design_setpoint("Zn 10 mg/L", LIMITS),
        "water",
        "a workbench Water is required",
    ),
    # ------------------------------------------------------------------ limits
    (
        "wb.load_limits",
        "`'40cfr999'` (unknown set)",
        lambda tmp: wb.load_limits("40cfr999"),
        "limit set",
        "known sets are 40cfr433.15",
    ),
    (
        "wb.permit_limits",
        "`{}` (empty)",
        lambda tmp: wb.permit_limits({}),
        "permit limits",
        "a non-empty mapping of metal to mg/L",
    ),
    (
        "wb.permit_limits",
        "`{'Zn': -1.0}`",
        lambda tmp: wb.permit_limits({"Zn": -1.0}),
        "permit limits['Zn']",
        "a positive number of mg/L",
    ),
    (
        "wb.permit_limits",
        "`{'Zn': nan}`",
        lambda tmp: wb.permit_limits({"Zn": math.nan}),
        "permit limits['Zn']",
        "a positive number of mg/L",
    ),
    (
        "wb.permit_limits",
        "`basis='weekly'`",
        lambda tmp: wb.permit_limits({"Zn": 1.0}, basis="weekly"),
        "basis",
        "allowed daily_max, monthly_avg",
    ),
    # ------------------------------------------------------------------ uncertainty band
    (
        "wb.uncertainty_band",
        "`samples=0`",
        lambda tmp: wb.uncertainty_band(WATER, [7.0], samples=0),
        "samples",
        "an integer from 1 to 20000",
    ),
    (
        "wb.uncertainty_band",
        "`samples=2.5`",
        lambda tmp: wb.uncertainty_band(WATER, [7.0], samples=2.5),
        "samples",
        "an integer from 1 to 20000",
    ),
    (
        "wb.uncertainty_band",
        "`seed=-1`",
        lambda tmp: wb.uncertainty_band(WATER, [7.0], samples=2, seed=-1),
        "seed",
        "an integer from 0 to",
    ),
    (
        "wb.uncertainty_band",
        "`quantiles=(0.5, 0.05, 0.95)`",
        lambda tmp: wb.uncertainty_band(WATER, [7.0], samples=2, quantiles=(0.5, 0.05, 0.95)),
        "quantiles",
        "three increasing fractions in [0, 1]",
    ),
    (
        "wb.uncertainty_band",
        "`quantiles=(0.05, 0.95)` (two)",
        lambda tmp: wb.uncertainty_band(WATER, [7.0], samples=2, quantiles=(0.05, 0.95)),
        "quantiles",
        "three increasing fractions in [0, 1]",
    ),
    (
        "wb.uncertainty_band",
        "`quantiles=('low', 0.5, 0.95)` (text)",
        lambda tmp: wb.uncertainty_band(WATER, [7.0], samples=2, quantiles=("low", 0.5, 0.95)),
        "quantiles",
        "three increasing fractions in [0, 1]",
    ),
    # ------------------------------------------------------------------ scenario files
    (
        "wb.read_scenario",
        "missing file",
        lambda tmp: wb.read_scenario(tmp / "missing.toml"),
        "scenario file",
        "an existing .toml file is required",
    ),
    (
        "wb.read_scenario",
        "not UTF-8 (a cp1252 byte)",
        lambda tmp: wb.read_scenario(
            _file(tmp, "cp1252.toml", DEMO_SCENARIO.replace("Demo plant", "Caf\xe9").encode("cp1252"))
        ),
        "scenario file",
        "UTF-8 text is required",
    ),
    (
        "wb.read_scenario",
        "truncated TOML (cut inside a table header)",
        lambda tmp: wb.read_scenario(
            _scenario(tmp, "cut.toml", DEMO_SCENARIO.split("[influent.metals_mg_l]")[0] + "[influent.metals")
        ),
        "scenario file",
        "valid TOML is required",
    ),
    (
        "wb.read_scenario",
        "unknown key `design.margn`",
        lambda tmp: wb.read_scenario(
            _scenario(tmp, "typo.toml", DEMO_SCENARIO.replace("[design]", "[design]\nmargn = 0.5"))
        ),
        "design.margn",
        "unknown key; known keys are margin",
    ),
    (
        "wb.read_scenario",
        "huge file (over 1 MB)",
        lambda tmp: wb.read_scenario(
            _scenario(tmp, "huge.toml", DEMO_SCENARIO + "#" * MAX_SCENARIO_BYTES + "\n")
        ),
        "scenario file",
        "files up to 1000000 bytes are accepted",
    ),
    (
        "wb.read_scenario",
        "`version = 2`",
        lambda tmp: wb.read_scenario(
            _scenario(tmp, "v2.toml", DEMO_SCENARIO.replace("version = 1", "version = 2"))
        ),
        "version",
        "this workbench reads scenario version 1",
    ),
    # ------------------------------------------------------------------ jar-test files
    (
        "wb.read_jar_tests",
        "missing file",
        lambda tmp: wb.read_jar_tests(tmp / "missing.csv"),
        "jar-test file",
        "an existing file is required",
    ),
    (
        "wb.read_jar_tests",
        "truncated (last row cut)",
        lambda tmp: wb.read_jar_tests(_file(tmp, "cut.csv", (JARS + "3,lime,3").encode())),
        "cut.csv, row 4, column 'ph'",
        "a value is required",
    ),
    (
        "wb.read_jar_tests",
        "truncated (inside quotes)",
        lambda tmp: wb.read_jar_tests(_file(tmp, "quote.csv", (JARS + '3,"lime').encode())),
        "quote.csv, row 4",
        "CSV text is expected",
    ),
    (
        "wb.read_jar_tests",
        "not UTF-8 (cp1252 byte)",
        lambda tmp: wb.read_jar_tests(
            _file(tmp, "cp1252.csv", JARS.replace("2,lime", "2,chaux \xe9teinte").encode("cp1252"))
        ),
        "cp1252.csv, row 3, column 'reagent'",
        "text in UTF-8 is expected",
    ),
    (
        "wb.read_jar_tests",
        "`encoding='klingon'` (unknown)",
        lambda tmp: wb.read_jar_tests(_file(tmp, "jars.csv", JARS.encode()), encoding="klingon"),
        "encoding",
        "a text encoding Python knows",
    ),
    (
        "wb.read_jar_tests",
        "huge file (over 20 MB)",
        lambda tmp: wb.read_jar_tests(_file(tmp, "huge.csv", b"#" * (jar_tests.MAX_FILE_BYTES + 1))),
        "huge.csv",
        "jar-test files up to 20 MB are accepted",
    ),
    # ------------------------------------------------------------------ reagent dose
    (
        "wb.dose_curve",
        "`reagent='bleach'` (unknown)",
        lambda tmp: wb.dose_curve(WATER, "bleach", [100.0]),
        "reagent",
        "known reagents are lime, quicklime",
    ),
    (
        "wb.dose_curve",
        "`dose_mg_l=[-5]`",
        lambda tmp: wb.dose_curve(WATER, "lime", [-5.0]),
        "dose_mg_l",
        "allowed 0 to 200000 mg/L",
    ),
    (
        "wb.dose_curve",
        "`dose_mg_l=[nan]`",
        lambda tmp: wb.dose_curve(WATER, "lime", [math.nan]),
        "dose_mg_l",
        "allowed 0 to 200000 mg/L",
    ),
    (
        "wb.dose_curve",
        "`purity=0`",
        lambda tmp: wb.dose_curve(WATER, "lime", [100.0], purity=0.0),
        "purity",
        "greater than 0 and at most 1",
    ),
    (
        "wb.dose_curve",
        "`purity=1.5`",
        lambda tmp: wb.dose_curve(WATER, "lime", [100.0], purity=1.5),
        "purity",
        "greater than 0 and at most 1",
    ),
    (
        "wb.dose_curve",
        "Water without a measured pH",
        lambda tmp: wb.dose_curve(wb.Water(metals_mg_l={"Zn": 1.0}), "lime", [100.0]),
        "ph",
        "a Water with a measured pH is required",
    ),
    (
        "wb.dose_for_ph",
        "`reagent='bleach'` (unknown)",
        lambda tmp: wb.dose_for_ph(WATER, "bleach", 9.0),
        "reagent",
        "known reagents are lime, quicklime",
    ),
    (
        "wb.dose_for_ph",
        "`purity=0`",
        lambda tmp: wb.dose_for_ph(WATER, "lime", 9.0, purity=0.0),
        "purity",
        "greater than 0 and at most 1",
    ),
    (
        "wb.dose_for_ph",
        "`purity=-0.5`",
        lambda tmp: wb.dose_for_ph(WATER, "lime", 9.0, purity=-0.5),
        "purity",
        "greater than 0 and at most 1",
    ),
    (
        "wb.dose_for_ph",
        "`target_ph=nan`",
        lambda tmp: wb.dose_for_ph(WATER, "lime", math.nan),
        "target_ph",
        "a pH between 0 and 14",
    ),
    (
        "wb.dose_for_ph",
        "`target_ph=5` (below pH 7)",
        lambda tmp: wb.dose_for_ph(WATER, "lime", 5.0),
        "target_ph",
        "allowed above the water's pH without reagent",
    ),
    (
        "wb.dose_for_ph",
        "`target_ph=13.9`, lime",
        lambda tmp: wb.dose_for_ph(WATER, "lime", 13.9),
        "target_ph",
        "its ceiling here",
    ),
    # ------------------------------------------------------------------ sizes
    (
        "wb.residual_curve",
        "`ph=` 3 million points",
        lambda tmp: wb.residual_curve(WATER, np.linspace(0.0, 14.0, 3_000_000)),
        "ph",
        "at most 15000 pH values per call",
    ),
    (
        "wb.dose_curve",
        "`dose_mg_l='100'` (text)",
        lambda tmp: wb.dose_curve(WATER, "lime", "100"),
        "dose_mg_l",
        "a number or a 1-D sequence of numbers (mg/L)",
    ),
    (
        "wb.dose_curve",
        "`dose_mg_l=[True]`",
        lambda tmp: wb.dose_curve(WATER, "lime", [True]),
        "dose_mg_l",
        "a number or a 1-D sequence of numbers (mg/L)",
    ),
    (
        "wb.dose_curve",
        "`dose_mg_l=` 20,000 doses",
        lambda tmp: wb.dose_curve(WATER, "lime", np.linspace(0.0, 100.0, 20_000)),
        "dose_mg_l",
        "at most 15000 doses per call",
    ),
    (
        "wb.uncertainty_band",
        "`samples=20000` on 281 pH points",
        lambda tmp: wb.uncertainty_band(WATER, np.linspace(0.0, 14.0, 281), samples=20_000),
        "samples",
        "at most 3000000 samples x pH points per band",
    ),
    (
        "wb.uncertainty_band",
        "`progress=5` (not a function)",
        lambda tmp: wb.uncertainty_band(WATER, [7.0], samples=2, progress=5),
        "progress",
        "a function progress(done, total), or None",
    ),
    (
        "wb.uncertainty_band",
        "`limits={'Zn': 0}`",
        lambda tmp: wb.uncertainty_band(WATER, [9.0], samples=2, limits={"Zn": 0}, setpoint_ph=9.0),
        "limits['Zn']",
        "a positive number of mg/L",
    ),
    (
        "wb.uncertainty_band",
        "`limits={'Zn': nan}`",
        lambda tmp: wb.uncertainty_band(WATER, [9.0], samples=2, limits={"Zn": math.nan}, setpoint_ph=9.0),
        "limits['Zn']",
        "a positive number of mg/L",
    ),
    (
        "wb.uncertainty_band",
        "`limits={'Hg': 1.0}` (not in the water)",
        lambda tmp: wb.uncertainty_band(WATER, [9.0], samples=2, limits={"Hg": 1.0}, setpoint_ph=9.0),
        "limits",
        "a limit for a metal of this water",
    ),
    (
        "wb.uncertainty_band",
        "`limits=` without `setpoint_ph`",
        lambda tmp: wb.uncertainty_band(WATER, [9.0], samples=2, limits={"Zn": 1.0}),
        "setpoint_ph",
        "a pH is required with limits",
    ),
    (
        "wb.design_setpoint",
        "`progress=5` (not a function)",
        lambda tmp: wb.design_setpoint(WATER, LIMITS, progress=5),
        "progress",
        "a function progress(done, total), or None",
    ),
    # ------------------------------------------------------------------ permit limits
    (
        "wb.permit_limits",
        "`{'Hg': 1.0}` (unknown metal)",
        lambda tmp: wb.permit_limits({"Hg": 1.0}),
        "permit limits",
        "known metals are Cu, Ni, Zn",
    ),
    (
        "wb.permit_limits",
        "`{'zn': 1.0}` (wrong case)",
        lambda tmp: wb.permit_limits({"zn": 1.0}),
        "permit limits",
        "write the metal key 'Zn'",
    ),
    (
        "wb.permit_limits",
        "`{'Cr(VI)': 1.0}`",
        lambda tmp: wb.permit_limits({"Cr(VI)": 1.0}),
        "permit limits['Cr(VI)']",
        "must be reduced to Cr(III)",
    ),
    (
        "wb.permit_limits",
        "`{'Zn2+': 1.0}` (an ion)",
        lambda tmp: wb.permit_limits({"Zn2+": 1.0}),
        "permit limits",
        "write the metal key 'Zn'",
    ),
    # ------------------------------------------------------------------ jar-test calibration
    (
        "wb.fit_solubility_shifts",
        "a jar table of 0 rows",
        lambda tmp: wb.fit_solubility_shifts(_jars().iloc[0:0], WATER),
        "jar tests",
        "at least one jar result",
    ),
    (
        "wb.overlay",
        "`value_mg_l=-0.5` in a row",
        lambda tmp: wb.overlay(_jars(value_mg_l=-0.5), WATER),
        "jar tests row 0 (jar '1') value_mg_l",
        "a result above 0 mg/L",
    ),
    (
        "wb.overlay",
        "`pH=15` in a row",
        lambda tmp: wb.overlay(_jars(pH=15.0), WATER),
        "jar tests row 0 (jar '1') pH",
        "a measured pH from 0 to 14",
    ),
    (
        "wb.flag_jars",
        "`far_log=-1`",
        lambda tmp: wb.flag_jars(_jars(), WATER, far_log=-1.0),
        "far_log",
        "a number of log10 units above 0",
    ),
    (
        "wb.flag_jars",
        "`far_log=nan`",
        lambda tmp: wb.flag_jars(_jars(), WATER, far_log=math.nan),
        "far_log",
        "a number of log10 units above 0",
    ),
    (
        "wb.flag_jars",
        "`carryover_ratio=0.5`",
        lambda tmp: wb.flag_jars(_jars(), WATER, carryover_ratio=0.5),
        "carryover_ratio",
        "a ratio of total to dissolved of 1 or more",
    ),
    (
        "wb.flag_jars",
        "`uncaptured_fraction=1.5`",
        lambda tmp: wb.flag_jars(_jars(), WATER, uncaptured_fraction=1.5),
        "uncaptured_fraction",
        "a fraction from 0 to 1",
    ),
    (
        "wb.flag_jars",
        "`ph_tolerance=-0.1`",
        lambda tmp: wb.flag_jars(_jars(), WATER, ph_tolerance=-0.1),
        "ph_tolerance",
        "pH units above 0",
    ),
    (
        "wb.calibrated_shift",
        "`fits={'Zn': 0.5}` (not fits)",
        lambda tmp: wb.calibrated_shift({"Zn": 0.5}),
        "fits",
        "the mapping fit_solubility_shifts returns",
    ),
    # ------------------------------------------------------------------ hostile files
    (
        "wb.read_jar_tests",
        ".xlsx, 2 million shared strings",
        lambda tmp: wb.read_jar_tests(_file(tmp, "bomb.xlsx", hostile.shared_strings_bomb())),
        "bomb.xlsx: xl/sharedStrings.xml",
        "(limit: shared strings)",
    ),
    (
        "wb.read_jar_tests",
        ".xlsx, 500x2**20 declared",
        lambda tmp: wb.read_jar_tests(_file(tmp, "bomb.xlsx", hostile.dimension_bomb())),
        "bomb.xlsx: xl/worksheets/sheet1.xml",
        "limit: declared dimensions)",
    ),
    (
        "wb.read_jar_tests",
        ".xlsx, a cell in row 1,048,576",
        lambda tmp: wb.read_jar_tests(_file(tmp, "bomb.xlsx", hostile.far_cell_bomb())),
        "bomb.xlsx: xl/worksheets/sheet1.xml",
        "(limit: cells)",
    ),
    (
        "wb.read_jar_tests",
        ".xlsx, 190 MB of spaces unpacked",
        lambda tmp: wb.read_jar_tests(_file(tmp, "bomb.xlsx", hostile.whitespace_bomb())),
        "bomb.xlsx",
        "(limit: unpacked size)",
    ),
    (
        "wb.read_scenario",
        "TOML nested 100,000 deep",
        lambda tmp: wb.read_scenario(_scenario(tmp, "deep.toml", hostile.deep_toml(100_000))),
        "scenario file",
        "valid TOML nested a few levels deep is required",
    ),
    (
        "wb.save_scenario",
        "a target `notes.csv` (not .toml)",
        lambda tmp: wb.save_scenario(wb.read_scenario(demo_scenario_path()), tmp / "notes.csv"),
        "scenario file",
        "a file name ending in .toml",
    ),
    (
        "export_figure_pack",
        "a folder holding other files",
        lambda tmp: export_figure_pack(_pack_scenario(), _file(tmp, "summary.html", b"own").parent),
        "out_dir",
        "a new or empty folder, or one an earlier pack wrote",
    ),
    (
        "export_figure_pack",
        "a pack file changed since it was written",
        lambda tmp: export_figure_pack(_pack_scenario(), _changed_pack(tmp), formats=("html",)),
        "file",
        "changed since an earlier pack wrote it",
    ),
    (
        "export_figure_pack",
        "`keep=` the scenario, in the way",
        lambda tmp: export_figure_pack(
            _pack_scenario(), tmp, keep=[_scenario(tmp, "scenario.toml", DEMO_SCENARIO)], overwrite=True
        ),
        "out_dir",
        "does not replace its own input",
    ),
    (
        "export_figure_pack",
        "a folder under a file (unwritable)",
        lambda tmp: export_figure_pack(_pack_scenario(), _file(tmp, "report.txt", b"x") / "pack"),
        "out_dir",
        "can create and write to",
    ),
    (
        "export_figure_pack",
        "`progress=5` (not a function)",
        lambda tmp: export_figure_pack(_pack_scenario(), tmp / "pack", progress=5),
        "progress",
        "a function progress(done, total), or None",
    ),
    (
        "wb.dose_curve",
        "`reactor='aerated'` (unknown)",
        lambda tmp: wb.dose_curve(WATER, "lime", [100.0], reactor="aerated"),
        "reactor",
        "allowed closed (no gas exchange) or open",
    ),
    (
        "wb.dose_for_ph",
        "`pco2_atm=2`, open reactor",
        lambda tmp: wb.dose_for_ph(WATER, "caustic", 9.0, reactor="open", pco2_atm=2.0),
        "pco2_atm",
        "allowed greater than 0 and at most 1 atm",
    ),
    (
        "wb.dose_for_ph",
        "`pco2_atm=0.01`, closed reactor",
        lambda tmp: wb.dose_for_ph(WATER, "caustic", 9.0, pco2_atm=0.01),
        "pco2_atm",
        "applies to reactor='open' only",
    ),
]


def _markdown_row(entry: str, bad: str, field: str, allowed: str) -> str:
    return f"| `{entry}` | {bad} | `{field}`: {allowed} |"


def _row_id(entry: str, bad: str) -> str:
    return f"{entry} " + re.sub(r"[^A-Za-z0-9_.=()\[\]-]+", " ", bad).strip()


@pytest.mark.parametrize(
    "entry, bad, call, field, allowed",
    ROWS,
    ids=[_row_id(entry, bad) for entry, bad, *_ in ROWS],
)
def test_bad_input_is_refused_with_the_field_and_what_is_allowed(tmp_path, entry, bad, call, field, allowed):
    with pytest.raises(wb.InputError) as err:
        call(tmp_path)
    assert isinstance(err.value, ValueError)
    assert err.value.field == field
    assert allowed in err.value.allowed
    message = str(err.value)
    assert message.startswith(f"{field}: got ") and allowed in message


def test_the_documented_table_is_the_tested_table():
    lines = [ln for ln in __doc__.splitlines() if ln.startswith("| `")]
    assert lines == [_markdown_row(entry, bad, field, allowed) for entry, bad, _, field, allowed in ROWS]


def test_an_empty_metal_mapping_is_a_valid_water():
    water = wb.Water(metals_mg_l={}, sodium_mg_l=46.0, chloride_mg_l=71.0)
    assert dict(water.metals_mg_l) == {}
    curve = wb.residual_curve(water, [7.0, 9.0])
    assert curve.shape == (2, 0) and list(curve.index) == [7.0, 9.0]
