"""Setpoint design panel: influent, limits, margin and reagent in; the pH window, setpoint, headroom, reagent dose
and sludge out, on one interactive figure.

A thin view (DESIGN.md section 6): it builds controls, reads them into a :class:`~workbench.scenario.Scenario`,
calls the treatment layer (:func:`workbench.design_setpoint`, :mod:`workbench.treatment.dose`) and draws with
:func:`workbench.figures.setpoint.fig_setpoint`. It computes nothing itself. A bad value is shown beside its field
and nothing else changes: the other inputs, the figure and the tables keep their last good state.
"""

from __future__ import annotations

import html
import logging
import re
import time
from collections import OrderedDict
from dataclasses import replace

import ipywidgets as widgets
import numpy as np
import plotly.graph_objects as go

import workbench as wb
from workbench.errors import InputError
from workbench.figures.setpoint import fig_setpoint
from workbench.scenario import (
    DesignOptions,
    LimitsChoice,
    ReagentChoice,
    Scenario,
    UncertaintySettings,
    demo_scenario_path,
    design_scenario,
    read_scenario,
    save_scenario,
)
from workbench.treatment import dose as _dose
from workbench.treatment import reagents as rg
from workbench.treatment.limits import BASES
from workbench.treatment.setpoint import RULES
from workbench.treatment.water import METALS, Water
from workbench.widgets.display import PERMIT_GOVERNS, STYLE, cautions_html, fmt, items, table
from workbench.widgets.fields import (
    Field,
    FieldError,
    choice_field,
    float_field,
    int_field,
    set_text_number,
    text_field,
    text_number_field,
)

log = logging.getLogger(__name__)

NONE = ""  # dropdown value for "no example set" / "most stringent basis" (ipywidgets shows None as blank)
DEFAULT_STEP = 0.02  # pH grid step of the design (design_setpoint's default) [pH units]
CACHE_SIZE = 8

METAL_LABELS = {"Cr": "Cr (III)", "Fe": "Fe (III)", "Fe(II)": "Fe (II)"}
#: Influent fields other than metals, pH and temperature: (Water field, label, unit).
MAJOR_FIELDS = (
    ("alkalinity_mg_l_caco3", "alkalinity", "mg/L as CaCO₃"),
    ("sulfate_mg_l", "sulfate", "mg/L as SO₄"),
    ("chloride_mg_l", "chloride", "mg/L as Cl"),
    ("fluoride_mg_l", "fluoride", "mg/L as F"),
    ("sodium_mg_l", "sodium", "mg/L as Na"),
    ("calcium_mg_l", "calcium", "mg/L as Ca"),
    ("magnesium_mg_l", "magnesium", "mg/L as Mg"),
    ("ammonia_mg_l_n", "ammonia", "mg/L as N"),
    ("edta_mg_l", "EDTA", "mg/L as the acid"),
    ("citrate_mg_l", "citrate", "mg/L as citric acid"),
    ("tss_mg_l", "suspended solids", "mg/L"),
)
#: Optional measured influent values (blank: not measured): (Water field, label, unit, hint).
MEASURED_FIELDS = (
    (
        "acidity_mg_l_caco3",
        "acidity (hot peroxide)",
        "mg/L as CaCO₃",
        "net acidity to pH 8.3 (negative: net alkaline); when given it sizes the unmeasured acid",
    ),
)
REACTOR_LABELS = {"closed": "closed (no gas exchange)", "open": "open to the air (aerated)"}
BASIS_LABELS = {
    "daily_max": "daily maximum",
    "monthly_avg": "monthly average",
    "four_day_avg": "4-day average",
    "instantaneous_max": "instantaneous maximum",
    "permit": "permit",
}
RULE_LABELS = {"widest_centre": "centre of the widest window", "max_headroom": "largest headroom"}
SOLIDS_LABELS = {"fresh": "fresh precipitate (clarifier)", "aged": "aged solids (lower bound)"}

#: Names in InputError.field (core and scenario spellings) -> the panel field that shows the message.
_FIELD_OF = {
    "name": "name",
    "temperature_c": "temperature_c",
    "ph": "ph",
    **{name: name for name, _, _ in MAJOR_FIELDS},
    **{name: name for name, *_ in MEASURED_FIELDS},
    "limits.set": "limit_set",
    "limit set": "limit_set",
    "limits.basis": "basis",
    "basis": "basis",
    "limits.permit": "permit",
    "permit limits": "permit",
    "limits": "permit",
    "limits.permit_source": "permit_source",
    "source": "permit_source",
    "design.margin": "margin",
    "margin": "margin",
    "design.ph_low": "ph_low",
    "design.ph_high": "ph_high",
    "ph_range": "ph_low",
    "design.rule": "rule",
    "rule": "rule",
    "design.effluent_tss_mg_l": "effluent_tss_mg_l",
    "effluent_tss_mg_l": "effluent_tss_mg_l",
    "design.solids": "solids",
    "solids": "solids",
    "reagent.name": "reagent",
    "reagent": "reagent",
    "reagent.purity": "purity",
    "purity": "purity",
    "reagent.flow_m3_d": "flow_m3_d",
    "flow_m3_d": "flow_m3_d",
    "reagent.reactor": "reactor",
    "reactor": "reactor",
    "uncertainty.samples": "samples",
    "samples": "samples",
    "uncertainty.seed": "seed",
    "seed": "seed",
    "uncertainty.default_uncertainty": "default_uncertainty",
    "default_uncertainty": "default_uncertainty",
}
_METAL_FIELD = re.compile(r"^metals_mg_l\[['\"](.+)['\"]\]$")


def field_for(name: str) -> str:
    """The panel field that shows an :class:`InputError` raised for the core's or the scenario's ``name``
    ("" when it belongs to none: shown at the panel level)."""
    name = name.removeprefix("influent.")
    match = _METAL_FIELD.match(name) or re.match(r"^metals_mg_l\.(.+)$", name)
    if match:
        return f"metal:{match.group(1)}"
    if name.startswith("limits.permit."):
        return "permit"
    if name.startswith("calibration"):
        return "calibration"
    return _FIELD_OF.get(name, "")


def _measured_names() -> tuple[str, ...]:
    return tuple(name for name, *_ in MEASURED_FIELDS)


def message_of(exc: InputError) -> str:
    """What to show beside a field: the value given and what is allowed (the field is where it is shown; an entry
    of a multi-entry field, such as one metal of the permit limits, is named)."""
    entry = re.match(r"^(?:limits\.permit|calibration(?:\.interval)?)\.(.+)$", exc.field)
    return (f"{entry.group(1)}: " if entry else "") + f"got {exc.value!r}; {exc.allowed}"


def parse_permit(text: str) -> dict[str, float]:
    """Permit limits typed one per line, ``Zn = 1.0`` (or ``Zn: 1.0``); blank lines and ``#`` comments skipped.

    Only the layout is read here; the metal keys and values are checked by the scenario (LimitsChoice).

    Raises
    ------
    ValueError
        A line that is not ``metal = number`` or a metal given twice (the message names the line).
    """
    out: dict[str, float] = {}
    for number, line in enumerate(text.splitlines(), start=1):
        body = line.split("#", 1)[0].strip()
        if not body:
            continue
        match = re.fullmatch(r"([A-Za-z][A-Za-z0-9()]*)\s*[=:]\s*(\S+)(?:\s*mg/L)?", body)
        if not match:
            raise ValueError(f"line {number} ({line.strip()!r}): write metal = mg/L, e.g. Zn = 1.0")
        metal, raw = match.groups()
        try:
            value = float(raw)
        except ValueError:
            hint = "; use a decimal point" if "," in raw else ""
            raise ValueError(f"line {number} ({line.strip()!r}): {raw!r} is not a number{hint}") from None
        if metal in out:
            raise ValueError(f"line {number}: {metal} is given twice")
        out[metal] = value
    return out


def format_permit(permit) -> str:
    return "\n".join(f"{k} = {_num(v)}" for k, v in permit.items())


def _num(value: float) -> str:
    text = repr(float(value))
    return text[:-2] if text.endswith(".0") else text


class SetpointPanel:
    """Interactive setpoint design for one influent.

    Parameters
    ----------
    scenario : Scenario, optional
        Initial inputs (e.g. ``read_scenario(path)``); the bundled demo plant (invented) when omitted.
    ph_step : float
        pH grid step of the design. [pH units]

    Attributes
    ----------
    fields : dict of str -> Field
        Every input with its error line (keys: ``metal:Zn``, ``ph``, ``margin``, ``limit_set``, ``permit``, ...).
    figure : plotly.graph_objects.FigureWidget
        The design figure, redrawn in place.
    design : SetpointDesign or None
        The last design drawn.
    timings : dict
        Seconds taken by the last update: ``figure`` (inputs read -> figure data set), ``dose``, ``band``.
    """

    def __init__(self, scenario: Scenario | None = None, *, ph_step: float = DEFAULT_STEP):
        if scenario is None:
            scenario = read_scenario(demo_scenario_path())
        self.ph_step = ph_step
        self.design = None
        self.dose_table = None
        self.sludge_table = None
        self.timings: dict[str, float] = {}
        self._calibration = scenario.calibration
        self._muted = False
        self._designs: OrderedDict = OrderedDict()
        self._doses: OrderedDict = OrderedDict()
        self._build_controls(scenario)
        self._build_outputs()
        self.widget = self._layout()
        self._wire()
        self._recompute()

    # ================================================================================================ building
    def _build_controls(self, s: Scenario) -> None:
        w, d = s.water, s.design
        reagent = s.reagent or ReagentChoice()
        f: dict[str, Field] = {}
        f["name"] = text_field("name", "scenario name", s.name, width="26em")
        for key in METALS:
            f[f"metal:{key}"] = float_field(
                f"metal:{key}",
                METAL_LABELS.get(key, key),
                float(w.metals_mg_l.get(key, 0.0)),
                "mg/L",
                hint="mg/L as the element; 0 = absent",
                label_width="5em",
            )
        f["ph"] = text_number_field("ph", "measured pH", w.ph, "", placeholder="blank: not measured")
        f["temperature_c"] = float_field("temperature_c", "temperature", w.temperature_c, "°C")
        for name, label, unit in MAJOR_FIELDS:
            f[name] = float_field(name, label, float(getattr(w, name)), unit)
        for name, label, unit, hint in MEASURED_FIELDS:
            f[name] = text_number_field(
                name, label, getattr(w, name), unit, placeholder="blank: not measured", hint=hint
            )
        sets = [("none", NONE)] + [(wb.load_limits(n).attrs["title"], n) for n in wb.available_limit_sets()]
        f["limit_set"] = choice_field(
            "limit_set", "example limit set", sets, s.limits.set or NONE, width="26em"
        )
        bases = [("most stringent listed", NONE)] + [(BASIS_LABELS.get(b, b), b) for b in BASES]
        f["basis"] = choice_field("basis", "limit basis", bases, s.limits.basis or NONE)
        f["permit"] = Field(
            "permit",
            "your permit limits",
            widgets.Textarea(
                value=format_permit(s.limits.permit),
                placeholder="one per line, total metal in mg/L, e.g.\nZn = 1.0\nNi = 0.5",
                continuous_update=False,
                layout=widgets.Layout(width="15em", height="5.5em"),
            ),
            "mg/L total",
            hint="replaces the example set's value for that metal",
        )
        f["permit_source"] = text_field(
            "permit_source", "permit reference", s.limits.permit_source or "", placeholder="e.g. permit no."
        )
        f["margin"] = Field(
            "margin",
            "design margin",
            widgets.FloatSlider(
                value=d.margin,
                min=0.1,
                max=1.0,
                step=0.05,
                continuous_update=False,
                readout_format=".2f",
                layout=widgets.Layout(width="16em"),
            ),
            "× limit",
            hint="design target = margin × limit",
        )
        f["ph_low"] = float_field("ph_low", "pH range from", d.ph_low)
        f["ph_high"] = float_field("ph_high", "pH range to", d.ph_high)
        f["rule"] = choice_field("rule", "setpoint rule", [(RULE_LABELS[r], r) for r in RULES], d.rule)
        f["effluent_tss_mg_l"] = text_number_field(
            "effluent_tss_mg_l",
            "clarifier effluent TSS",
            d.effluent_tss_mg_l,
            "mg/L",
            placeholder="blank: dissolved",
            hint="with a value, total metal (dissolved + carried-over solids) is compared with the limits",
        )
        f["solids"] = choice_field(
            "solids", "solids", [(SOLIDS_LABELS[k], k) for k in SOLIDS_LABELS], d.solids
        )
        facts = rg.load()
        f["reagent"] = choice_field(
            "reagent", "reagent", [(facts[k].name, k) for k in rg.REAGENTS], reagent.name
        )
        f["purity"] = text_number_field("purity", "purity", reagent.purity, "fraction as sold")
        f["flow_m3_d"] = text_number_field(
            "flow_m3_d", "flow", reagent.flow_m3_d, "m³/d", placeholder="blank: no kg/d"
        )
        f["reactor"] = choice_field(
            "reactor", "reactor", [(REACTOR_LABELS[k], k) for k in REACTOR_LABELS], reagent.reactor
        )
        u = s.uncertainty
        f["samples"] = int_field("samples", "samples", u.samples)
        f["seed"] = int_field("seed", "seed", u.seed)
        f["default_uncertainty"] = float_field(
            "default_uncertainty",
            "default ±",
            u.default_uncertainty,
            "log₁₀ units",
            hint="used for constants published without an uncertainty",
        )
        f["path"] = text_field("path", "scenario file", "", width="22em", placeholder="e.g. plant_a.toml")
        self.fields = f
        self.use_calibration = widgets.Checkbox(
            value=s.calibration is not None,
            disabled=s.calibration is None,
            description="use the jar-test calibration",
            indent=False,
        )
        self.calibration_note = widgets.HTML(self._calibration_html())
        self.calibration_error = Field("calibration", "", widgets.HTML(""), label_width="0")
        self.compute_band = widgets.Button(description="Compute band", icon="play", button_style="info")
        self.progress = widgets.IntProgress(value=0, min=0, max=max(u.samples, 1), description="samples")
        self.load_button = widgets.Button(description="Load", icon="folder-open")
        self.save_button = widgets.Button(description="Save", icon="save")
        self._set_purity_placeholder()

    def _build_outputs(self) -> None:
        self.figure = go.FigureWidget(layout=dict(height=580, margin=dict(l=70, r=20, t=105, b=50)))
        self.status = widgets.HTML("")
        self.panel_error = widgets.HTML("")
        self.headroom = widgets.HTML("")
        self.stages = widgets.HTML("")
        self.dose = widgets.HTML("")
        self.band_status = widgets.HTML("")
        self.band_table = widgets.HTML("")
        self.notes = widgets.HTML("")
        self.file_status = widgets.HTML("")
        self.cautions = widgets.HTML(cautions_html())

    def _layout(self) -> widgets.Widget:
        f = self.fields
        boxes = lambda *names: [f[n].box for n in names]  # noqa: E731
        metals = widgets.GridBox(
            [f[f"metal:{k}"].box for k in METALS],
            layout=widgets.Layout(grid_template_columns="repeat(2, 15em)", grid_gap="0 6px"),
        )
        heading = lambda text: widgets.HTML(f"<h4>{html.escape(text)}</h4>")  # noqa: E731
        inputs = widgets.VBox(
            [
                heading("Influent"),
                *boxes("name"),
                widgets.HTML('<span style="color:#555">metals, mg/L as the element (0 = absent)</span>'),
                metals,
                *boxes(
                    "ph", *(n for n, *_ in MEASURED_FIELDS), "temperature_c", *(n for n, _, _ in MAJOR_FIELDS)
                ),
                heading("Limits"),
                widgets.HTML(f'<span style="color:#555">{html.escape(PERMIT_GOVERNS)}</span>'),
                *boxes("limit_set", "basis", "permit", "permit_source"),
                heading("Design"),
                *boxes("margin", "ph_low", "ph_high", "rule", "effluent_tss_mg_l", "solids"),
                heading("Reagent"),
                *boxes("reagent", "purity", "flow_m3_d", "reactor"),
                heading("Jar-test calibration"),
                self.use_calibration,
                self.calibration_note,
                self.calibration_error.box,
                heading("Scenario file"),
                f["path"].box,
                widgets.HBox([self.load_button, self.save_button]),
                self.file_status,
            ],
            layout=widgets.Layout(width="34em", min_width="34em", padding="0 12px 0 0"),
        )
        band = widgets.VBox(
            [
                heading("Monte Carlo band (uncertainty of the constants)"),
                *boxes("samples", "seed", "default_uncertainty"),
                widgets.HBox([self.compute_band, self.progress]),
                self.band_status,
                self.band_table,
            ]
        )
        results = widgets.VBox(
            [
                self.status,
                self.panel_error,
                self.figure,
                heading("At the setpoint"),
                self.headroom,
                self.stages,
                heading("Reagent and sludge"),
                self.dose,
                band,
                heading("Notes and model warnings"),
                self.notes,
            ],
            layout=widgets.Layout(flex="1 1 auto", min_width="30em"),
        )
        panel = widgets.VBox([widgets.HTML(STYLE), self.cautions, widgets.HBox([inputs, results])])
        panel.add_class("wb-panel")
        return panel

    def _wire(self) -> None:
        """Every observer, in one place. Values change on release / Enter only (continuous_update=False)."""
        for key in METALS:
            self.fields[f"metal:{key}"].control.observe(self._on_metal_change, names="value")
        for name in ("name", "ph", "temperature_c", *(n for n, _, _ in MAJOR_FIELDS), *_measured_names()):
            self.fields[name].control.observe(self._on_influent_change, names="value")
        for name in ("limit_set", "basis", "permit", "permit_source"):
            self.fields[name].control.observe(self._on_limits_change, names="value")
        self.fields["margin"].control.observe(self._on_margin_change, names="value")
        for name in ("ph_low", "ph_high", "rule", "effluent_tss_mg_l", "solids"):
            self.fields[name].control.observe(self._on_design_change, names="value")
        self.fields["reagent"].control.observe(self._on_reagent_change, names="value")
        for name in ("purity", "flow_m3_d", "reactor"):
            self.fields[name].control.observe(self._on_feed_change, names="value")
        self.use_calibration.observe(self._on_use_calibration_change, names="value")
        self.compute_band.on_click(self._on_compute_band_click)
        self.load_button.on_click(self._on_load_click)
        self.save_button.on_click(self._on_save_click)

    def _repr_mimebundle_(self, **kwargs):
        return self.widget._repr_mimebundle_(**kwargs)

    # ================================================================================================ handlers
    def _on_metal_change(self, change) -> None:
        self._react()

    def _on_influent_change(self, change) -> None:
        self._react()

    def _on_limits_change(self, change) -> None:
        self._react()

    def _on_margin_change(self, change) -> None:
        self._react()

    def _on_design_change(self, change) -> None:
        self._react()

    def _on_reagent_change(self, change) -> None:
        self._set_purity_placeholder()
        self._react()

    def _on_feed_change(self, change) -> None:
        self._react()

    def _on_use_calibration_change(self, change) -> None:
        self._react()

    def _on_compute_band_click(self, button) -> None:
        self._guarded(self._compute_band)

    def _on_load_click(self, button) -> None:
        self._guarded(self._load)

    def _on_save_click(self, button) -> None:
        self._guarded(self._save)

    def _react(self) -> None:
        if not self._muted:
            self._guarded(self._recompute)

    def _guarded(self, action) -> None:
        """Run a handler's work; an unexpected exception is logged and shown in the panel, inputs untouched."""
        try:
            action()
        except Exception as exc:  # a widget callback must never die silently
            log.exception("setpoint panel: %s failed", getattr(action, "__name__", "update"))
            self._show_panel_error(f"{type(exc).__name__}: {exc}")
            self._set_status(
                "Not updated: an error occurred (shown here); the figure shows the last good inputs."
            )

    # ================================================================================================ inputs
    def state(self) -> Scenario:
        """The current inputs as a Scenario.

        Raises
        ------
        InputError
            The first bad input (every bad input is also shown beside its field).
        """
        scenario, errors = self._read()
        if scenario is None:
            name, message = next(iter(errors.items()))
            raise InputError(name or "inputs", None, message)
        return scenario

    def _read(self) -> tuple[Scenario | None, dict[str, str]]:
        """Read every control; (scenario, {}) or (None, {field: message}) with every error found."""
        errors: dict[str, str] = {}

        def attempt(make):
            try:
                return make()
            except FieldError as exc:
                errors.setdefault(exc.field.name, exc.message)
            except InputError as exc:
                errors.setdefault(field_for(exc.field), message_of(exc))
            return None

        water = self._water(errors)
        limits = attempt(self._limits)
        design = attempt(self._design_options)
        reagent = attempt(self._reagent)
        uncertainty = attempt(self._uncertainty)
        if errors:
            return None, errors
        calibration = self._calibration if self.use_calibration.value else None
        scenario = attempt(
            lambda: Scenario(
                name=self.fields["name"].value,
                water=water,
                limits=limits,
                design=design,
                reagent=reagent,
                calibration=calibration,
                uncertainty=uncertainty,
            )
        )
        if scenario is not None and limits.empty:
            errors["limit_set"] = "choose an example limit set or enter your permit limits below"
        return (None, errors) if errors else (scenario, {})

    def _influent_numbers(self, errors: dict[str, str]) -> dict[str, float | None]:
        """Every influent number, each checked on its own by the core (Water) so that every bad one is marked."""
        f = self.fields
        out: dict[str, float | None] = {}
        names = [f"metal:{k}" for k in METALS] + ["ph", "temperature_c", *(n for n, _, _ in MAJOR_FIELDS)]
        names += _measured_names()
        for name in names:
            try:
                value = f[name].number(
                    optional=name in ("ph", *_measured_names()), blank="blank = not measured"
                )
            except FieldError as exc:
                errors.setdefault(name, exc.message)
                continue
            out[name] = value
            alone = {"metals_mg_l": {name[6:]: value}} if name.startswith("metal:") else {name: value}
            if name == "alkalinity_mg_l_caco3":
                continue  # depends on the pH and the ions: checked with the whole water
            try:
                Water(**alone)
            except InputError as exc:
                errors.setdefault(field_for(exc.field) or name, message_of(exc))
        return out

    def _water(self, errors: dict[str, str]) -> Water | None:
        """The influent, or None with every bad field in ``errors``."""
        found = len(errors)
        numbers = self._influent_numbers(errors)
        if len(errors) > found:
            return None
        try:
            return Water(
                metals_mg_l={k: numbers[f"metal:{k}"] for k in METALS if numbers[f"metal:{k}"] != 0.0},
                ph=numbers["ph"],
                temperature_c=numbers["temperature_c"],
                name=self.fields["name"].value,
                **{name: numbers[name] for name, _, _ in MAJOR_FIELDS},
                **{name: numbers[name] for name in _measured_names()},
            )
        except InputError as exc:
            errors.setdefault(field_for(exc.field), message_of(exc))
            return None

    def _limits(self) -> LimitsChoice:
        f = self.fields
        try:
            permit = parse_permit(f["permit"].value)
        except ValueError as exc:
            raise FieldError(f["permit"], str(exc)) from None
        source = f["permit_source"].value.strip() or None
        return LimitsChoice(
            set=f["limit_set"].value or None,
            basis=f["basis"].value or None,
            permit=permit,
            permit_source=source,
        )

    def _design_options(self) -> DesignOptions:
        f = self.fields
        return DesignOptions(
            margin=f["margin"].number(),
            ph_low=f["ph_low"].number(),
            ph_high=f["ph_high"].number(),
            rule=f["rule"].value,
            effluent_tss_mg_l=f["effluent_tss_mg_l"].number(optional=True, blank="blank = dissolved only"),
            solids=f["solids"].value,
        )

    def _reagent(self) -> ReagentChoice:
        f = self.fields
        return ReagentChoice(
            name=f["reagent"].value,
            purity=f["purity"].number(optional=True, blank="blank = default purity"),
            flow_m3_d=f["flow_m3_d"].number(optional=True, blank="blank = no daily amounts"),
            reactor=f["reactor"].value,
        )

    def _uncertainty(self) -> UncertaintySettings:
        f = self.fields
        return UncertaintySettings(
            samples=f["samples"].value,
            seed=f["seed"].value,
            default_uncertainty=f["default_uncertainty"].number(),
        )

    def _set_controls(self, s: Scenario) -> None:
        """Show a scenario in the controls (observers muted; one update follows)."""
        f, w, d = self.fields, s.water, s.design
        reagent = s.reagent or ReagentChoice()
        self._muted = True
        try:
            f["name"].value = s.name
            for key in METALS:
                f[f"metal:{key}"].value = float(w.metals_mg_l.get(key, 0.0))
            set_text_number(f["ph"], w.ph)
            f["temperature_c"].value = w.temperature_c
            for name, _, _ in MAJOR_FIELDS:
                f[name].value = float(getattr(w, name))
            for name in _measured_names():
                set_text_number(f[name], getattr(w, name))
            f["limit_set"].value = s.limits.set or NONE
            f["basis"].value = s.limits.basis or NONE
            f["permit"].value = format_permit(s.limits.permit)
            f["permit_source"].value = s.limits.permit_source or ""
            f["margin"].value = d.margin
            f["ph_low"].value, f["ph_high"].value = d.ph_low, d.ph_high
            f["rule"].value, f["solids"].value = d.rule, d.solids
            set_text_number(f["effluent_tss_mg_l"], d.effluent_tss_mg_l)
            f["reagent"].value = reagent.name
            set_text_number(f["purity"], reagent.purity)
            set_text_number(f["flow_m3_d"], reagent.flow_m3_d)
            f["reactor"].value = reagent.reactor
            f["samples"].value = s.uncertainty.samples
            f["seed"].value = s.uncertainty.seed
            f["default_uncertainty"].value = s.uncertainty.default_uncertainty
            self._calibration = s.calibration
            self.use_calibration.value = s.calibration is not None
            self.use_calibration.disabled = s.calibration is None
            self.calibration_note.value = self._calibration_html()
            self._set_purity_placeholder()
        finally:
            self._muted = False

    def _set_purity_placeholder(self) -> None:
        key = self.fields["reagent"].value
        try:
            default = rg.get(key).purity.value
            self.fields["purity"].control.placeholder = f"{default:g} (default)"
        except InputError:
            self.fields["purity"].control.placeholder = "blank = default"

    def _calibration_html(self) -> str:
        cal = self._calibration
        if cal is None or not cal.shift:
            return '<span style="color:#555">none in this scenario (fit one in the jar-test notebook)</span>'
        rows = []
        for metal, shift in cal.shift.items():
            low, high = cal.interval.get(metal, (None, None))
            span = f"{low:+.2f} to {high:+.2f}" if low is not None else "–"
            rows.append([html.escape(metal), f"{shift:+.2f}", span])
        note = f"<br><i>{html.escape(cal.note)}</i>" if cal.note else ""
        return (
            "apparent solubility shift, log₁₀ units (every solid of the metal 10^shift times more soluble):"
            + table(["metal", "shift", "interval"], rows)
            + note
        )

    # ================================================================================================ errors
    def _all_fields(self) -> list[Field]:
        return [*self.fields.values(), self.calibration_error]

    def _clear_errors(self) -> None:
        for field in self._all_fields():
            field.clear_error()
        self.panel_error.value = ""

    def _show_errors(self, errors: dict[str, str]) -> None:
        for name, message in errors.items():
            target = self.calibration_error if name == "calibration" else self.fields.get(name)
            if target is None:
                self._show_panel_error(message if not name else f"{name}: {message}")
            else:
                target.show_error(message)

    def _show_input_error(self, exc: InputError) -> None:
        log.info("setpoint panel: input refused: %s", exc)
        self._show_errors({field_for(exc.field): message_of(exc) if field_for(exc.field) else str(exc)})

    def _show_panel_error(self, message: str) -> None:
        self.panel_error.value = (
            f'<div style="color:#B00020; border-left:3px solid #B00020; padding-left:6px">&#9888; '
            f"{html.escape(message)}</div>"
        )

    def _set_status(self, text: str) -> None:
        self.status.value = f'<span style="color:#555">{html.escape(text)}</span>'

    # ================================================================================================ updates
    def _recompute(self) -> None:
        """Read the inputs; on any error show it beside its field and keep everything else as it was."""
        start = time.perf_counter()
        self._clear_errors()
        scenario, errors = self._read()
        if scenario is None:
            self._show_errors(errors)
            self._set_status(
                "Not updated: correct the field marked ⚠ (the figure shows the last good inputs)."
            )
            return
        self._set_status("Computing… (when no single pH works, the two-stage search takes several seconds)")
        try:
            design = self._design_for(scenario)
        except InputError as exc:
            self._show_input_error(exc)
            self._set_status(
                "Not updated: correct the field marked ⚠ (the figure shows the last good inputs)."
            )
            return
        self._draw(scenario, design)
        self.timings = {"figure": time.perf_counter() - start}
        self.band_status.value = ""
        self.band_table.value = ""
        self._show_results(design)
        self._update_dose(scenario, design)
        self._set_status(
            f"Updated in {self.timings['figure']:.2f} s"
            + (f"; reagent and sludge in {self.timings['dose']:.2f} s" if "dose" in self.timings else "")
            + "."
        )

    def _design_for(self, scenario: Scenario, *, progress=None, samples: int = 0):
        """The treatment layer's design for these inputs (recent designs without a band are reused)."""
        if samples:
            return design_scenario(scenario, samples=samples, step=self.ph_step, progress=progress)
        key = (replace(scenario, name="").to_toml(), self.ph_step)  # the name changes no number
        if key in self._designs:
            self._designs.move_to_end(key)
            return self._designs[key]
        design = design_scenario(scenario, samples=0, step=self.ph_step)
        self._designs[key] = design
        while len(self._designs) > CACHE_SIZE:
            self._designs.popitem(last=False)
        return design

    def _draw(self, scenario: Scenario, design) -> None:
        subtitle = f"{design.compared} metal against pH; example limits are not a permit: the local permit governs"
        fig_setpoint(
            design, band=design.band, fig=self.figure, title=scenario.name or "Setpoint design", subtitle=subtitle
        )
        self.design = design
        self.scenario = scenario

    def _show_results(self, design) -> None:
        self.headroom.value = self._headroom_html(design)
        self.stages.value = self._stages_html(design)
        notes = [*design.notes]
        self.notes.value = items(notes) + (
            "<b>Model warnings</b>" + items(design.warnings) if design.warnings else ""
        )

    def _headroom_html(self, design) -> str:
        t = design.table
        ph = t.attrs.get("ph")
        if design.setpoint_ph is not None:
            where = f"setpoint pH {design.setpoint_ph:.2f} ({RULE_LABELS[design.rule]})"
        elif design.stages:
            where = f"the end of stage 2, pH {ph:.2f}"
        else:
            where = f"pH {ph:.2f}, the best single pH: no pH meets every target"
        windows = ", ".join(f"{a:.2f}–{b:.2f}" for a, b in design.windows) or "none"
        edges = "; ".join(f"{lo} at the low end, {hi} at the high end" for lo, hi in design.edges)
        rows = []
        total = "total_mg_l" in t.columns and t["total_mg_l"].notna().any()
        for metal, r in t.iterrows():
            headroom = r["headroom"]
            shown = ">1000×" if headroom > 1000 else f"{headroom:.2g}×"
            ok = "yes" if r["meets_target"] else '<b style="color:#B00020">no</b>'
            row = [
                html.escape(metal),
                fmt(r.get("limit_mg_l")),
                html.escape(BASIS_LABELS.get(r.get("basis"), "–")),
            ]
            row += [fmt(r["target_mg_l"]), fmt(r["dissolved_mg_l"])]
            row += [fmt(r["total_mg_l"])] if total else []
            rows.append(row + [shown, ok])
        header = ["metal", "limit (mg/L)", "basis", "target (mg/L)", "dissolved (mg/L)"]
        header += ["total (mg/L)"] if total else []
        header += ["headroom (target ÷ predicted)", "meets target"]
        text = (2, len(header) - 1)
        sources = sorted({str(s) for s in t.get("source", []) if isinstance(s, str) and s})
        return (
            f"<div>pH window(s) where every metal meets margin × limit: <b>{windows}</b>"
            + (f" (limited by {html.escape(edges)})" if edges else "")
            + f".<br>Compared: {html.escape(design.compared)}, at {html.escape(where)}; "
            f"target = {design.margin:g} × limit.</div>"
            + table(header, rows, text=text)
            + f'<div style="font-size:85%; color:#555">Limits from: {html.escape("; ".join(sources)) or "–"}. '
            f"<b>{html.escape(PERMIT_GOVERNS)}</b></div>"
        )

    def _stages_html(self, design) -> str:
        if not design.stages:
            return ""
        rows = []
        for st in design.stages:
            lo, hi = st["ph_range"]
            rows.append(
                [
                    str(st["stage"]),
                    f"{st['ph']:.2f}",
                    f"{lo:.2f}–{hi:.2f}",
                    html.escape(", ".join(st["removes"]) or "–"),
                    html.escape(", ".join(f"{k} {fmt(v)}" for k, v in st["effluent_mg_l"].items())),
                ]
            )
        return (
            "<b>No single pH meets every target: two-stage scheme</b> (solids separated after stage 1)"
            + table(["stage", "pH", "pH range that works", "removes", "effluent (mg/L)"], rows, text=(3, 4))
        )

    # ------------------------------------------------------------------------------------------------ dose
    def _update_dose(self, scenario: Scenario, design) -> None:
        self.dose_table = self.sludge_table = None
        if design.setpoint_ph is not None:
            target, what = design.setpoint_ph, f"the setpoint, pH {design.setpoint_ph:.2f}"
        elif design.stages:
            target, what = design.stages[0]["ph"], f"stage 1, pH {design.stages[0]['ph']:.2f}"
        else:
            self.dose.value = '<span style="color:#555">no setpoint: no dose computed</span>'
            return
        start = time.perf_counter()
        r = scenario.reagent
        self.dose.value = '<span style="color:#555">computing the dose and the sludge…</span>'
        try:
            daily, sludge = self._dose_for(scenario.water, r, target, scenario.design.solids)
        except InputError as exc:
            log.info("setpoint panel: dose not computed: %s", exc)
            self.dose.value = (
                f'<span style="color:#B00020">&#9888; Dose not computed: {html.escape(str(exc))}</span>'
            )
            return
        except Exception as exc:  # shown beside the dose, the design stays
            log.exception("setpoint panel: dose failed")
            self.dose.value = (
                f'<span style="color:#B00020">&#9888; Dose not computed: {html.escape(type(exc).__name__)}: '
                f"{html.escape(str(exc))}</span>"
            )
            return
        self.timings["dose"] = time.perf_counter() - start
        self.dose_table, self.sludge_table = daily, sludge
        self.dose.value = self._dose_html(daily, sludge, what, r, design)

    def _dose_for(self, water: Water, r: ReagentChoice, target: float, solids: str):
        key = (repr(water), r.name, r.purity, r.flow_m3_d, r.reactor, target, solids)
        if key in self._doses:
            return self._doses[key]
        common = dict(purity=r.purity, solids=solids, reactor=r.reactor)
        if r.flow_m3_d is not None:
            daily = _dose.daily_table(water, r.name, target, r.flow_m3_d, **common)
            dose_mg_l = float(daily["dose_mg_l"].iloc[0])
        else:
            daily = None
            dose_mg_l = float(_dose.dose_for_ph(water, r.name, target, **common))
        sludge = _dose.sludge_at_dose(water, r.name, dose_mg_l, flow_m3_d=r.flow_m3_d, **common)
        self._doses[key] = (daily, sludge)
        while len(self._doses) > CACHE_SIZE:
            self._doses.popitem(last=False)
        return daily, sludge

    def _dose_html(self, daily, sludge, what: str, r: ReagentChoice, design) -> str:
        name = rg.get(r.name).name
        dose_mg_l = sludge.attrs["dose_mg_l"]
        purity = sludge.attrs["purity"]
        lines = [
            f"<b>{html.escape(name)}</b> (purity {purity:g}) to {html.escape(what)}, "
            f"{html.escape(REACTOR_LABELS[sludge.attrs['reactor']])} reactor: "
            f"<b>{dose_mg_l:.4g} mg/L</b> of product as sold"
        ]
        if daily is not None:
            d = daily.iloc[0]
            lines[0] += (
                f" = <b>{d['reagent_kg_d']:.4g} kg/d</b> at {r.flow_m3_d:g} m³/d "
                f"(active ingredient {d['active_kg_d']:.4g} kg/d"
                + (f"; {d['product_m3_d']:.3g} m³/d of product" if np.isfinite(d["product_m3_d"]) else "")
                + ")"
            )
            ceiling = d["ceiling_ph"]
            lines.append(
                f"Highest pH this reagent reaches in this water: {ceiling:.2f}"
                if np.isfinite(ceiling)
                else "This reagent has no pH ceiling: overshoot redissolves amphoteric metals."
            )
        if design.stages:
            lines.append("Stage 2 starts from the stage-1 effluent: its dose is not computed here.")
        if self.use_calibration.value and self._calibration is not None:
            lines.append(
                "The dose uses the theoretical solubilities (the calibration shifts the metals only)."
            )
        rows = []
        per_day = "kg_d" in sludge.columns
        for solid, s in sludge.iterrows():
            row = [html.escape(str(solid)), fmt(s["mg_l"])]
            rows.append(row + ([fmt(s["kg_d"])] if per_day else []))
        header = ["dry sludge", "mg/L"] + (["kg/d"] if per_day else [])
        warn = sludge.attrs.get("warnings") or []
        return (
            "<div>"
            + "<br>".join(lines)
            + "</div>"
            + table(header, rows)
            + (items([w for w in warn if w not in design.warnings]) if warn else "")
        )

    # ------------------------------------------------------------------------------------------------ band
    def _compute_band(self) -> None:
        self._clear_errors()
        scenario, errors = self._read()
        if scenario is None:
            self._show_errors(errors)
            self.band_status.value = "Band not computed: correct the field marked ⚠."
            return
        samples = scenario.uncertainty.samples
        if samples < 1:
            self.fields["samples"].show_error("at least 1 sample is needed for a band (e.g. 200)")
            return
        self.progress.max, self.progress.value = samples, 0
        self.band_status.value = f"Computing {samples} samples…"
        start = time.perf_counter()
        try:
            design = self._design_for(scenario, samples=samples, progress=self._on_progress)
        except InputError as exc:
            self._show_input_error(exc)
            self.band_status.value = "Band not computed: correct the field marked ⚠."
            return
        self._draw(scenario, design)
        self.timings["band"] = time.perf_counter() - start
        self._show_results(design)
        band = design.band
        q = band.quantiles
        self.band_status.value = (
            f"{band.samples} samples (seed {band.seed}) in {self.timings['band']:.1f} s: shaded "
            f"{100 * q[0]:g}–{100 * q[2]:g} % band of dissolved metal. It is cleared when an input changes."
        )
        if band.probability_meets is not None:
            rows = [[html.escape(m), f"{100 * p:.0f} %"] for m, p in band.probability_meets.items()]
            self.band_table.value = (
                f"Share of samples meeting the limit at pH {band.setpoint_ph:.2f}:"
                + table(["metal", "meets the limit"], rows)
            )

    def _on_progress(self, done: int, total: int) -> None:
        self.progress.max = total
        self.progress.value = done

    # ------------------------------------------------------------------------------------------------ files
    def _save(self) -> None:
        path_field = self.fields["path"]
        path_field.clear_error()
        path = path_field.value.strip()
        if not path:
            path_field.show_error("type a file name, e.g. plant_a.toml")
            return
        self._clear_errors()
        scenario, errors = self._read()
        if scenario is None:
            self._show_errors(errors)
            path_field.show_error("not saved: correct the fields marked ⚠ first")
            return
        try:
            written = save_scenario(scenario, path)
        except InputError as exc:
            log.info("setpoint panel: not saved: %s", exc)
            path_field.show_error(message_of(exc))
            return
        self.file_status.value = f"Saved to {html.escape(str(written.resolve()))}"

    def _load(self) -> None:
        path_field = self.fields["path"]
        path_field.clear_error()
        path = path_field.value.strip()
        if not path:
            path_field.show_error("type the path of a scenario file (.toml)")
            return
        try:
            scenario = read_scenario(path)
        except InputError as exc:
            log.info("setpoint panel: not loaded: %s", exc)
            path_field.show_error(f"not loaded: {exc}")
            return
        self._set_controls(scenario)
        self.file_status.value = f"Loaded {html.escape(path)}"
        self._recompute()


__all__ = ["SetpointPanel", "field_for", "parse_permit"]
