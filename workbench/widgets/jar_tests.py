"""Jar-test review panel: load bench results, see them over the predicted curves, fit the apparent solubility
shift per metal, read the flags, and carry the calibration into a scenario file.

A thin view over :mod:`workbench.treatment.calibration` and :func:`workbench.figures.fig_jar_tests`: it reads
files, calls the treatment layer and shows its tables; it computes nothing itself.
"""

from __future__ import annotations

import html
import logging
import math
import time
from dataclasses import replace
from pathlib import Path

import ipywidgets as widgets
import numpy as np
import pandas as pd
import plotly.graph_objects as go

import workbench as wb
from workbench.errors import InputError
from workbench.figures import fig_jar_tests
from workbench.scenario import Calibration, demo_scenario_path, read_scenario, save_scenario
from workbench.treatment import calibration as cal
from workbench.treatment.water import Water
from workbench.widgets.display import STYLE, cautions_html, error_text, fmt, items, table
from workbench.widgets.fields import Field, text_field

log = logging.getLogger(__name__)

UPLOAD_MAX_BYTES = 5_000_000  # a jar-test sheet is a few kB; larger uploads are refused before reading
UPLOAD_KINDS = {".csv": "csv", ".txt": "csv", ".tsv": "csv", ".xlsx": "xlsx", ".xlsm": "xlsx"}
CURVE_STEP = 0.05  # pH step of the predicted curves [pH units]
FLAG_LABELS = {
    "complexant_suspected": "complexant suspected",
    "solids_carry_over": "solids carry-over",
    "minimum_ph_differs": "minimum at another pH",
}


def curve_ph(tidy: pd.DataFrame) -> np.ndarray:
    """pH grid of the predicted curves: the tested range widened by half a unit, 0.05 apart. [-]"""
    lo = max(0.0, math.floor((float(tidy["pH"].min()) - 0.5) * 10) / 10)
    hi = min(14.0, math.ceil((float(tidy["pH"].max()) + 0.5) * 10) / 10)
    return np.round(np.arange(lo, hi + CURVE_STEP / 2, CURVE_STEP), 3)


class JarTestPanel:
    """Interactive jar-test review against one influent.

    Parameters
    ----------
    water : Water, optional
        The influent the jars were filled with; the demo plant's (invented) when omitted.
    path : str or pathlib.Path, optional
        A jar-test file to load at once.

    Attributes
    ----------
    tidy : pandas.DataFrame or None
        The jar results as read (:func:`workbench.read_jar_tests`).
    fits : dict of str -> ShiftFit or None
        Fitted apparent solubility shift per metal.
    predicted, calibrated : pandas.DataFrame or None
        The curves drawn (theory, and with the fitted shifts). [mg/L]
    figure : plotly.graph_objects.FigureWidget
    """

    def __init__(self, water: Water | None = None, *, path=None):
        if water is None:
            water = read_scenario(demo_scenario_path()).water
        self.water = water
        self.tidy = self.fits = self.predicted = self.calibrated = None
        self.flags = self.minima = self.overlay = None
        self.timings: dict[str, float] = {}
        self._build_controls(path)
        self._build_outputs()
        self.widget = self._layout()
        self._wire()
        self._show_influent()
        if path is not None:
            self._guarded(self._load_path)

    # ================================================================================================ building
    def _build_controls(self, path) -> None:
        self.upload = widgets.FileUpload(accept=",".join(UPLOAD_KINDS), multiple=False, description="Upload")
        self.upload_field = Field(
            "upload",
            "jar-test file",
            self.upload,
            f"CSV or Excel (.xlsx), up to {UPLOAD_MAX_BYTES // 1_000_000} MB",
        )
        self.path_field = text_field(
            "path",
            "or a file on disk",
            "" if path is None else str(path),
            width="28em",
            placeholder="jars.csv",
        )
        self.load_button = widgets.Button(description="Load", icon="folder-open")
        self.scenario_field = text_field(
            "scenario_path", "scenario file", "", width="28em", placeholder="e.g. plant_a.toml"
        )
        self.influent_button = widgets.Button(
            description="Use its influent",
            icon="flask",
            tooltip="compare the jars with this scenario's influent",
        )
        self.carry_button = widgets.Button(
            description="Carry calibration into scenario",
            icon="save",
            button_style="info",
            layout=widgets.Layout(width="20em"),
        )

    def _build_outputs(self) -> None:
        self.figure = go.FigureWidget(
            layout=dict(width=1050, height=640, margin=dict(l=70, r=20, t=60, b=50))
        )
        self.status = widgets.HTML("")
        self.panel_error = widgets.HTML("")
        self.influent = widgets.HTML("")
        self.fits_html = widgets.HTML("")
        self.flags_html = widgets.HTML("")
        self.minima_html = widgets.HTML("")
        self.jars_html = widgets.HTML("")
        self.overlay_html = widgets.HTML("")
        self.notes = widgets.HTML("")
        self.carry_status = widgets.HTML("")
        self.cautions = widgets.HTML(
            cautions_html().replace(
                "</div>",
                "<p style='margin:2px 0'>A fitted shift describes these jars only; refit when the wastewater, "
                "the reagent or the settling changes.</p></div>",
            )
        )

    def _layout(self) -> widgets.Widget:
        heading = lambda text: widgets.HTML(f"<h4>{html.escape(text)}</h4>")  # noqa: E731
        tables = widgets.Tab(
            [
                widgets.Box([self.jars_html], layout=widgets.Layout(overflow="auto", max_height="26em")),
                widgets.Box([self.overlay_html], layout=widgets.Layout(overflow="auto", max_height="26em")),
            ]
        )
        tables.set_title(0, "jars as read")
        tables.set_title(1, "vs predicted")
        panel = widgets.VBox(
            [
                widgets.HTML(STYLE),
                self.cautions,
                heading("Jar-test results"),
                self.upload_field.box,
                widgets.HBox([self.path_field.box, self.load_button]),
                self.influent,
                self.status,
                self.panel_error,
                self.figure,
                heading("Apparent solubility shift per metal (fitted to the dissolved results)"),
                self.fits_html,
                heading("Flags"),
                self.flags_html,
                heading("Lowest dissolved result: observed against predicted"),
                self.minima_html,
                tables,
                self.notes,
                heading("Carry the calibration into a scenario"),
                widgets.HBox([self.scenario_field.box, self.influent_button]),
                self.carry_button,
                self.carry_status,
            ]
        )
        panel.add_class("wb-panel")
        return panel

    def _wire(self) -> None:
        """Every observer, in one place."""
        self.upload.observe(self._on_upload_change, names="value")
        self.load_button.on_click(self._on_load_click)
        self.influent_button.on_click(self._on_influent_click)
        self.carry_button.on_click(self._on_carry_click)

    def _repr_mimebundle_(self, **kwargs):
        return self.widget._repr_mimebundle_(**kwargs)

    # ================================================================================================ handlers
    def _on_upload_change(self, change) -> None:
        if change["new"]:
            self._guarded(self._load_upload)

    def _on_load_click(self, button) -> None:
        self._guarded(self._load_path)

    def _on_influent_click(self, button) -> None:
        self._guarded(self._use_scenario_influent)

    def _on_carry_click(self, button) -> None:
        self._guarded(self._carry)

    def _guarded(self, action) -> None:
        """Run a handler's work; an unexpected exception is logged and shown in the panel, inputs untouched."""
        try:
            action()
        except Exception as exc:  # a widget callback must never die silently
            log.exception("jar-test panel: %s failed", getattr(action, "__name__", "update"))
            self.panel_error.value = f'<div style="color:#B00020">&#9888; {error_text(exc)}</div>'

    # ================================================================================================ loading
    def _load_upload(self) -> None:
        self.upload_field.clear_error()
        item = self.upload.value[0]
        name, size = str(item["name"]), int(item["size"])
        kind = UPLOAD_KINDS.get(Path(name).suffix.lower())
        if kind is None:
            self.upload_field.show_error(f"{name}: a .csv or .xlsx file is required")
            return
        if size > UPLOAD_MAX_BYTES:
            self.upload_field.show_error(
                f"{name}: {size} bytes; uploads up to {UPLOAD_MAX_BYTES // 1_000_000} MB are accepted"
            )
            return
        try:
            tidy = wb.read_jar_tests(bytes(item["content"]), file_format=kind)
        except InputError as exc:
            log.info("jar-test panel: upload refused: %s", exc)
            self.upload_field.show_error(f"{name}: {exc}")
            return
        tidy.attrs["source"] = name
        self._analyse(tidy)

    def _load_path(self) -> None:
        self.path_field.clear_error()
        path = self.path_field.value.strip()
        if not path:
            self.path_field.show_error("type the path of a jar-test file (.csv or .xlsx)")
            return
        try:
            tidy = wb.read_jar_tests(path)
        except InputError as exc:
            log.info("jar-test panel: file refused: %s", exc)
            self.path_field.show_error(str(exc))
            return
        self._analyse(tidy)

    def _use_scenario_influent(self) -> None:
        self.scenario_field.clear_error()
        path = self.scenario_field.value.strip()
        if not path:
            self.scenario_field.show_error("type the path of a scenario file (.toml)")
            return
        try:
            water = read_scenario(path).water
        except InputError as exc:
            self.scenario_field.show_error(f"not read: {exc}")
            return
        self.water = water
        self._show_influent()
        if self.tidy is not None:
            self._analyse(self.tidy)

    # ================================================================================================ analysis
    def _analyse(self, tidy: pd.DataFrame) -> None:
        """Fit, draw and tabulate; each table is computed on its own so one failure hides nothing else."""
        self.panel_error.value = ""
        source = tidy.attrs.get("source", "jar-test file")
        self.status.value = f"Read {tidy['jar'].nunique()} jars from {html.escape(str(source))}; fitting…"
        start = time.perf_counter()
        water = self.water
        diss = tidy.loc[tidy["fraction"] == "dissolved", "metal"]
        metals = [m for m in dict.fromkeys(diss) if m in water.metals_mg_l]
        fits = cal.fit_solubility_shifts(tidy, water, metals=metals)
        ph = curve_ph(tidy)
        predicted = wb.residual_curve(water, ph)
        calibrated = cal.calibrated_curve(water, ph, fits)
        title = f"Jar tests ({source}) over the predicted dissolved metal"
        fig_jar_tests(tidy, predicted, calibrated_curve=calibrated, fig=self.figure, title=title)
        self.tidy, self.fits, self.predicted, self.calibrated = tidy, fits, predicted, calibrated
        self.timings = {"analysis": time.perf_counter() - start}
        self.fits_html.value = self._fits_html(fits)
        self.jars_html.value = self._jars_html(tidy)
        self.flags_html.value = self._section(lambda: self._flags_html(cal.flag_jars(tidy, water)))
        self.minima_html.value = self._section(lambda: self._minima_html(cal.compare_minima(tidy, water)))
        self.overlay_html.value = self._section(lambda: self._overlay_html(cal.overlay(tidy, water)))
        notes = list(tidy.attrs.get("notes", []))
        absent = sorted(set(tidy["metal"]) - set(water.metals_mg_l))
        if absent:
            notes.append(f"Not in the influent analysis, so not compared: {', '.join(absent)}.")
        ignored = tidy.attrs.get("ignored_columns") or []
        if ignored:
            notes.append(f"Columns not read: {', '.join(map(str, ignored))}.")
        self.notes.value = items(notes)
        self.timings["total"] = time.perf_counter() - start
        self.status.value = (
            f"{tidy['jar'].nunique()} jars from {html.escape(str(source))}, compared with the influent "
            f"{html.escape(water.name or '(unnamed)')}; analysed in {self.timings['total']:.1f} s."
        )

    def _section(self, make) -> str:
        try:
            return make()
        except Exception as exc:  # shown in its section; the rest of the review stands
            log.exception("jar-test panel: a table could not be computed")
            return f'<span style="color:#B00020">&#9888; Not computed: {error_text(exc)}</span>'

    def _show_influent(self) -> None:
        w = self.water
        metals = ", ".join(f"{k} {v:g}" for k, v in w.metals_mg_l.items()) or "none"
        ph = "not measured" if w.ph is None else f"{w.ph:g}"
        self.influent.value = (
            f'<div style="color:#333">Influent the jars were filled with: <b>{html.escape(w.name or "(unnamed)")}</b>'
            f" — metals (mg/L) {html.escape(metals)}; pH {ph}; {w.temperature_c:g} °C.</div>"
        )

    # ------------------------------------------------------------------------------------------------ tables
    def _fits_html(self, fits) -> str:
        fitted = cal.fits_table(fits)
        rows = []
        for metal, r in fitted.iterrows():
            low = "below any value" if r["low"] == -math.inf else fmt(r["low"], 2)
            interval = f"{low} to {fmt(r['high'], 2)}"
            rows.append(
                [
                    html.escape(metal),
                    "–" if not math.isfinite(r["shift"]) else f"{r['shift']:+.2f}",
                    interval,
                    f"{100 * r['confidence']:.0f} %" if math.isfinite(r["confidence"]) else "–",
                    f"{int(r['n_used'])} ({int(r['n_censored'])} below detection)",
                    html.escape(str(r["notes"]) or ""),
                ]
            )
        return (
            "Shift in log₁₀ units: every solid of the metal 10^shift times more soluble than in theory "
            "(0 = as predicted)."
            + table(["metal", "shift", "interval", "level", "jars used", "notes"], rows, text=(5,))
        )

    def _flags_html(self, flags: pd.DataFrame) -> str:
        self.flags = flags
        if flags.empty:
            return "No jar flagged."
        rows = [
            [
                html.escape(FLAG_LABELS.get(f["flag"], f["flag"])),
                html.escape(f["metal"] or "–"),
                html.escape(f["jars"] or "–"),
                html.escape(f["reason"]),
            ]
            for _, f in flags.iterrows()
        ]
        return table(["flag", "metal", "jars", "reason"], rows, text=(1, 2, 3))

    def _minima_html(self, minima: pd.DataFrame) -> str:
        self.minima = minima
        rows = []
        for metal, m in minima.iterrows():
            agree = {True: "yes", False: '<b style="color:#B00020">no</b>'}.get(m["agree"], "–")
            rows.append(
                [
                    html.escape(metal),
                    fmt(m["ph_min_observed"]),
                    ("<" if m["observed_min_censored"] else "") + fmt(m["residual_min_observed_mg_l"]),
                    fmt(m["ph_min_predicted"]),
                    fmt(m["residual_min_predicted_mg_l"]),
                    agree,
                    html.escape(m["note"] or ""),
                ]
            )
        header = [
            "metal",
            "observed pH",
            "observed (mg/L)",
            "predicted pH",
            "predicted (mg/L)",
            "agree",
            "note",
        ]
        return table(header, rows, text=(5, 6))

    def _jars_html(self, tidy: pd.DataFrame) -> str:
        jars = list(dict.fromkeys(tidy["jar"]))
        first = tidy.drop_duplicates("jar").set_index("jar")
        cols = list(dict.fromkeys(zip(tidy["metal"], tidy["fraction"], strict=True)))
        cell = {
            (r.jar, r.metal, r.fraction): ("<" + fmt(r.detection_limit_mg_l))
            if r.censored
            else fmt(r.value_mg_l)
            for r in tidy.itertuples()
        }
        rows = [
            [
                html.escape(str(j)),
                html.escape(str(first.at[j, "reagent"])),
                fmt(first.at[j, "dose_mg_l"], 4),
                f"{first.at[j, 'pH']:.2f}",
            ]
            + [html.escape(cell.get((j, m, fr), "")) for m, fr in cols]
            for j in jars
        ]
        header = ["jar", "reagent", "dose (mg/L)", "pH"] + [f"{m} {fr} (mg/L)" for m, fr in cols]
        return table(header, rows)

    def _overlay_html(self, ov: pd.DataFrame) -> str:
        self.overlay = ov
        diss = ov[(ov["fraction"] == "dissolved") & ov["predicted_mg_l"].notna()]
        rows = []
        for r in diss.itertuples():
            measured = ("<" + fmt(r.detection_limit_mg_l)) if r.censored else fmt(r.value_mg_l)
            ratio = "–" if not math.isfinite(r.log_residual) else f"{10**r.log_residual:.2g}×"
            rows.append(
                [
                    html.escape(str(r.jar)),
                    f"{r.pH:.2f}",
                    html.escape(r.metal),
                    measured,
                    fmt(r.predicted_mg_l),
                    ratio,
                ]
            )
        return table(
            ["jar", "pH", "metal", "dissolved (mg/L)", "predicted (mg/L)", "measured ÷ predicted"], rows
        )

    # ================================================================================================ carry
    def _carry(self) -> None:
        """Write the fitted shifts (and intervals) into a scenario file; every other entry stays as it was."""
        field = self.scenario_field
        field.clear_error()
        self.carry_status.value = ""
        path = field.value.strip()
        if self.fits is None:
            field.show_error("load jar tests first: there is no calibration yet")
            return
        if not path:
            field.show_error("type the path of the scenario file to update (.toml)")
            return
        try:
            scenario = read_scenario(path)
        except InputError as exc:
            field.show_error(f"not read: {exc}")
            return
        shift = cal.calibrated_shift(self.fits)
        kept = {m: v for m, v in shift.items() if m in scenario.water.metals_mg_l}
        if not kept:
            field.show_error("no fitted shift for a metal of this scenario's influent: nothing to carry")
            return
        interval = {}
        for metal, value in kept.items():
            fit = self.fits[metal]
            if math.isfinite(fit.low) and math.isfinite(fit.high) and fit.low <= value <= fit.high:
                interval[metal] = (float(fit.low), float(fit.high))
        source = self.tidy.attrs.get("source", "jar-test file")
        level = next(iter(self.fits.values())).confidence
        note = f"jar tests {source}, {self.tidy['jar'].nunique()} jars: fitted shift, {100 * level:.0f} % interval"
        try:
            updated = replace(scenario, calibration=Calibration(shift=kept, interval=interval, note=note))
            save_scenario(updated, path)
        except InputError as exc:
            log.info("jar-test panel: calibration not written: %s", exc)
            field.show_error(f"not written: {exc}")
            return
        left_out = sorted(set(shift) - set(kept))
        same = replace(scenario.water, name="") == replace(self.water, name="")
        lines = [
            f"Written into {html.escape(str(Path(path).resolve()))}: "
            + ", ".join(f"{m} {v:+.2f}" for m, v in kept.items())
            + ". Every other entry of the file is unchanged (comments in it are rewritten)."
        ]
        if left_out:
            lines.append(f"Not in that scenario's influent, not carried: {', '.join(left_out)}.")
        if not same:
            lines.append(
                "Note: that scenario's influent differs from the influent these jars were compared with; "
                "the shifts were fitted against the latter."
            )
        self.carry_status.value = "<br>".join(lines)


__all__ = ["JarTestPanel", "curve_ph"]
