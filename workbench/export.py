"""Figure pack for a permit file or an engineering report, computed from a saved scenario.

:func:`build_figure_pack` runs the design the scenario describes (setpoint window with its margin and limits,
the jar-test calibration as a solubility shift, the Monte Carlo band when ``samples`` > 0, each metal's minimum
solubility) and builds the figures, each with a caption printed inside it: conditions, the data sources used
(the references of the constants that matter for this water and of the limits) and the cautions.
:func:`export_figure_pack` writes it into one folder:

- ``setpoint.{png,svg,pdf,html}`` and ``residual_curves.{png,svg,pdf,html}``: the figures;
- ``minimum_solubility.csv``, ``setpoint_headroom.csv``, ``limits_used.csv``, ``windows.csv`` and, when the
  design has two stages, ``stages.csv``;
- ``tables.xlsx`` (the same tables, a sheet each);
- ``summary.html`` (tables, figures, cautions and sources in one offline page), ``cautions.txt``,
  ``sources.txt`` and ``scenario.toml`` (the inputs, to regenerate the pack);
- ``pack_manifest.json``: the files this pack wrote, each with its SHA-256.

Nothing is overwritten without asking. A pack goes into a new or empty folder, or into a folder an earlier pack
wrote, where it replaces only files that pack wrote and that are unchanged since (their SHA-256 as recorded in
``pack_manifest.json``); files of the earlier pack that this one does not write, unchanged, are removed, so the
folder holds one pack. Anything else in the way (a file of the user's, or one changed since) is refused, naming
it, unless ``overwrite=True`` (``--overwrite``). Input files named in ``keep`` (the command line names the
scenario read) are never replaced, even with ``overwrite``. The folder is created and checked writable before
anything is computed. Text from the scenario is escaped in every figure (plotly reads its text as HTML) and in
``summary.html``, and neutralised in every table cell a spreadsheet would run as a formula
(:mod:`workbench.tables`).

Static images (PNG, SVG, PDF) are rendered by kaleido in a Chromium browser, one browser for the whole pack.
The browser is the one named by ``BROWSER_PATH``, else ``chromium`` on the PATH, else Debian's
``/usr/bin/chromium``; nothing is ever downloaded. HTML files carry plotly.js inside them and work offline.

Every file is written inside the chosen folder only, through a temporary file and a rename, and the same
scenario gives byte-identical HTML, SVG, CSV and text files (PNG, PDF and tables.xlsx may differ in embedded times,
and the manifest with them).
"""

from __future__ import annotations

import hashlib
import html
import json
import os
import re
import shutil
import tempfile
import unicodedata
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from workbench.errors import InputError
from workbench.figures.caption import add_caption
from workbench.figures.residuals import fig_residual_curve
from workbench.figures.setpoint import fig_setpoint
from workbench.scenario import Scenario, design_scenario, write_atomic
from workbench.tables import table_csv, tables_xlsx
from workbench.treatment.cautions import cautions as standard_cautions
from workbench.treatment.provenance import constants_used, sources_of
from workbench.treatment.setpoint import SetpointDesign
from workbench.treatment.solubility import minimum_solubility, residual_curve
from workbench.treatment.uncertainty import check_progress

__all__ = [
    "FORMATS",
    "ExportError",
    "FigurePack",
    "build_figure_pack",
    "check_formats",
    "export_figure_pack",
    "find_browser",
    "image_server",
    "check_progress",
    "pack_file_names",
    "pack_folder_name",
]

FORMATS = ("png", "svg", "pdf", "html")
STATIC_FORMATS = ("png", "svg", "pdf")
DEBIAN_CHROMIUM = "/usr/bin/chromium"  # Debian's package path: the fallback when nothing else names a browser
BROWSER_NAMES = ("chromium", "chromium-browser")
PNG_SCALE = 2  # 2000 px wide: sharp in a printed report
CURVE_STEP = 0.05  # pH step of the residual-curve figure
MAX_CAPTION_SOURCES = 12
MAX_SLUG = 80  # characters of the scenario name kept in a pack folder's name
MANIFEST = "pack_manifest.json"
MANIFEST_VERSION = 1
MAX_MANIFEST_BYTES = 1_000_000
FIGURE_STEMS = ("setpoint", "residual_curves")
TABLE_STEMS = ("minimum_solubility", "setpoint_headroom", "limits_used", "windows", "stages")
TEXT_FILES = ("tables.xlsx", "cautions.txt", "sources.txt", "scenario.toml", "summary.html")
CAUTION_LINE = (
    "Cautions: theoretical equilibrium, confirm with jar tests on the real wastewater; the local permit and a "
    "licensed engineer govern; reduce Cr(VI) and destroy cyanide before precipitation, never acidify cyanide; "
    "pH overshoot redissolves amphoteric metals."
)


class ExportError(RuntimeError):
    """Static export cannot run here (e.g. no Chromium browser); names what to install or set."""


# ---------------------------------------------------------------------------------------------------- the pack
@dataclass
class FigurePack:
    """Everything a figure pack holds, computed from one scenario (see :func:`build_figure_pack`).

    Attributes
    ----------
    scenario : Scenario
    design : SetpointDesign
    minima : pandas.DataFrame
        :func:`workbench.minimum_solubility` over the design pH range (with the calibration).
    residuals : pandas.DataFrame
        Dissolved metal against pH for every metal of the influent. [mg/L]
    figures : dict of str -> plotly Figure
        ``setpoint`` and ``residual_curves``, each captioned.
    captions : dict of str -> list of str
        The caption paragraphs of each figure.
    tables : dict of str -> pandas.DataFrame
        The summary tables written as CSV (file stem -> table).
    cautions : list of str
        Standard cautions, the limit note, the design's notes and the model's warnings.
    sources : pandas.DataFrame
        The references used (index key; ``short``, ``citation``, ``role``, ``rows``, ``names``).
    """

    scenario: Scenario
    design: SetpointDesign
    minima: pd.DataFrame
    residuals: pd.DataFrame
    figures: dict[str, go.Figure] = field(default_factory=dict)
    captions: dict[str, list[str]] = field(default_factory=dict)
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    cautions: list[str] = field(default_factory=list)
    sources: pd.DataFrame | None = None


def build_figure_pack(
    scenario: Scenario, *, progress: Callable[[int, int], None] | None = None
) -> FigurePack:
    """Compute the design, the minima, the figures (captioned), the tables, the cautions and the sources.

    Parameters
    ----------
    scenario : Scenario
        From :func:`workbench.scenario.read_scenario`; it needs a ``[limits]`` table.
    progress : callable(done, total), optional
        Called as Monte Carlo samples complete.
    """
    if not isinstance(scenario, Scenario):
        raise InputError(
            "scenario", type(scenario).__name__, "a workbench Scenario (read_scenario) is required"
        )
    check_progress(progress)
    water, d = scenario.water, scenario.design
    limits = scenario.limits_table()
    design = design_scenario(scenario, progress=progress)
    opts = dict(solids=d.solids, solubility_shift=scenario.solubility_shift)
    grid = np.round(np.arange(d.ph_low, d.ph_high + 1e-9, CURVE_STEP), 6)
    residuals = residual_curve(water, grid, **opts)
    minima = minimum_solubility(water, ph_range=(d.ph_low, d.ph_high), **opts)
    sources = sources_of(constants_used(water, grid, **opts))
    pack = FigurePack(scenario, design, minima, residuals, sources=sources)
    pack.tables = _tables(scenario, design, minima, limits)
    pack.cautions = _cautions(scenario, design, limits)
    conditions = _conditions(scenario, design, limits)
    source_line = _source_line(sources, limits)
    curve_conditions = _conditions(scenario, design, None)
    curve_sources = _source_line(sources, None)
    notes = len(pack.cautions) - len(standard_cautions())
    caution_line = f"{CAUTION_LINE} {notes} further notes on this design and model. See cautions.txt."
    name = scenario.name or "Scenario"
    pack.captions = {
        "setpoint": [
            f"{name}. Setpoint design: {design.compared} metal at equilibrium against pH (pH held by a strong "
            f"base or acid), with each metal's design target ({design.margin:g} x limit, dashed) and limit "
            f"(dotted); shaded: pH window meeting every target. {_result_line(design)}",
            conditions,
            source_line,
            caution_line,
        ],
        "residual_curves": [
            f"{name}. Dissolved metal at equilibrium against pH (pH held by a strong base or acid); diamonds: "
            "each metal's minimum solubility and its controlling solid (minimum_solubility.csv).",
            curve_conditions,
            curve_sources,
            caution_line,
        ],
    }
    pack.figures = {
        "setpoint": add_caption(
            fig_setpoint(design, band=design.band, title=f"{name}: pH setpoint design"),
            pack.captions["setpoint"],
        ),
        "residual_curves": add_caption(
            fig_residual_curve(residuals, minima, title=f"{name}: residual dissolved metal"),
            pack.captions["residual_curves"],
        ),
    }
    return pack


def _result_line(design: SetpointDesign) -> str:
    if design.setpoint_ph is not None:
        windows = ", ".join(f"{a:.2f}-{b:.2f}" for a, b in design.windows)
        return f"Result: window pH {windows}; setpoint pH {design.setpoint_ph:.2f} ({design.rule.replace('_', ' ')})."
    if design.stages:
        stages = " then ".join(f"stage {s['stage']} at pH {s['ph']:.2f}" for s in design.stages)
        return f"Result: no single pH meets every target; two stages: {stages} (solids removed in between)."
    return "Result: no pH meets every target (see cautions.txt)."


def _limits_label(scenario: Scenario, limits: pd.DataFrame) -> str:
    parts = []
    if scenario.limits.set is not None:
        parts.append(f"{limits.attrs.get('title', scenario.limits.set)} (example set)")
    if scenario.limits.permit:
        parts.append(f"permit limits ({scenario.limits.permit_source or 'local permit'})")
    basis = scenario.limits.basis or "most stringent basis per metal"
    return " + ".join(parts) + f", {basis.replace('_', ' ')}"


def _conditions(scenario: Scenario, design: SetpointDesign, limits: pd.DataFrame | None) -> str:
    """Conditions of a figure; with ``limits`` also the design's (margin, limits, Monte Carlo)."""
    w, d, u = scenario.water, scenario.design, scenario.uncertainty
    influent_ph = "not measured" if w.ph is None else f"{w.ph:g}"
    cal = scenario.calibration
    if cal is not None and cal.shift:
        shifts = ", ".join(f"{k} {v:+.2f}" for k, v in cal.shift.items())
        calibration = f"{shifts} log10 units" + (f" ({cal.note})" if cal.note else "")
    else:
        calibration = "none (theory only)"
    text = (
        f"Conditions: {w.temperature_c:g} °C; influent pH {influent_ph}; {d.solids} solids; pH range "
        f"{d.ph_low:g}-{d.ph_high:g}; calibration: {calibration}"
    )
    if limits is None:
        return text + "."
    if u.samples:
        band = design.band
        q = f"{100 * band.quantiles[0]:g}-{100 * band.quantiles[2]:g} % band" if band is not None else "band"
        mc = f"{u.samples} samples, seed {u.seed}, {q}, ± {u.default_uncertainty:g} where none is published"
    else:
        mc = "not run (samples = 0)"
    return (
        f"{text}; compared: {design.compared}; margin {d.margin:g}; limits: {_limits_label(scenario, limits)}; "
        f"Monte Carlo: {mc}."
    )


def _source_line(sources: pd.DataFrame, limits: pd.DataFrame | None) -> str:
    primary = sources[(sources["role"] == "constants") & (sources.index != "memory")]
    labels = list(primary["short"])
    shown = labels[:MAX_CAPTION_SOURCES]
    more = f" and {len(labels) - len(shown)} more" if len(labels) > len(shown) else ""
    if "memory" in sources.index:
        more += f"; {sources.loc['memory', 'rows']} values recalled without a readable source (tagged memory)"
    activity = sources[sources["role"] == "activity model"]["short"]
    text = f"Data sources: constants from {'; '.join(shown)}{more}; activity: Davies equation ({', '.join(activity)})"
    if limits is not None and "source" in limits.columns:
        text += "; limits: " + "; ".join(_short_limit_source(s) for s in sorted(set(limits["source"])))
    return text + ". Full references in sources.txt."


def _short_limit_source(citation: str) -> str:
    """'40 CFR 433.15' from a US CFR citation; the text itself (up to 80 characters) otherwise."""
    title = re.search(r"Title (\d+), Part (\d+)", citation)
    section = re.search(r"section (\d+\.\d+)", citation)
    if title and section:
        return f"{title.group(1)} CFR {section.group(1)} (US Code of Federal Regulations)"
    if title:
        return f"{title.group(1)} CFR {title.group(2)} (US Code of Federal Regulations)"
    return citation if len(citation) <= 80 else citation[:77] + "..."


def _cautions(scenario, design, limits) -> list[str]:
    out = list(standard_cautions())
    if "note" in limits.attrs:
        out.append(limits.attrs["note"])
    out += design.notes
    out += design.warnings
    if scenario.calibration is not None and scenario.calibration.shift:
        out.append(
            "A jar-test calibration (apparent solubility shift) is applied: it holds for the water and the "
            "conditions of those jar tests only."
        )
    if design.band is not None:
        out.append(
            "The uncertainty band covers the published ± of the constants only (dissolved metal); it does not "
            "cover kinetics, complexants not analysed, or solids capture."
        )
    return list(dict.fromkeys(out))


def _tables(scenario, design, minima, limits) -> dict[str, pd.DataFrame]:
    headroom = design.table.copy()
    headroom.insert(0, "ph", design.table.attrs.get("ph"))
    band = design.band
    if band is not None and band.probability_meets is not None:
        headroom["probability_dissolved_meets_limit"] = band.probability_meets.reindex(headroom.index)
    used = limits.copy()
    # the row each metal was compared with: the most stringent (of the chosen basis), as design_setpoint picks it
    pool = used[used["metal"].isin(list(design.targets.index))]
    if scenario.limits.basis is not None:
        pool = pool[pool["basis"] == scenario.limits.basis]
    used["used_in_design"] = used.index.isin(pool.groupby("metal")["limit_mg_l"].idxmin())
    windows = pd.DataFrame(
        [(a, b, lo, hi) for (a, b), (lo, hi) in zip(design.windows, design.edges, strict=True)],
        columns=["ph_low", "ph_high", "limited_low_by", "limited_high_by"],
    )
    tables = {
        "minimum_solubility": minima,
        "setpoint_headroom": headroom,
        "limits_used": used,
        "windows": windows,
    }
    if design.stages:
        metals = list(design.targets.index)
        rows = []
        for s in design.stages:
            row = {
                "stage": s["stage"],
                "ph": s["ph"],
                "ph_low": s["ph_range"][0],
                "ph_high": s["ph_range"][1],
            }
            row["removes"] = " ".join(s["removes"])
            row.update({f"{m}_effluent_mg_l": s["effluent_mg_l"][m] for m in metals})
            rows.append(row)
        tables["stages"] = pd.DataFrame(rows)
    return tables


# ---------------------------------------------------------------------------------------------------- browser
def find_browser() -> str:
    """The Chromium executable for static export: ``BROWSER_PATH``, else ``chromium`` on the PATH, else
    Debian's ``/usr/bin/chromium``.

    Raises
    ------
    ExportError
        When none is found (the message says what to install); nothing is ever downloaded.
    """
    named = os.environ.get("BROWSER_PATH")
    if named:
        if os.path.isfile(named) and os.access(named, os.X_OK):
            return named
        raise ExportError(f"BROWSER_PATH names {named!r}, which is not an executable file")
    for name in BROWSER_NAMES:
        found = shutil.which(name)
        if found:
            return found
    if os.path.isfile(DEBIAN_CHROMIUM) and os.access(DEBIAN_CHROMIUM, os.X_OK):
        return DEBIAN_CHROMIUM
    raise ExportError(
        "PNG, SVG and PDF export needs a Chromium browser and none was found (BROWSER_PATH unset, no "
        "'chromium' on the PATH). Install it (Debian: apt-get install --no-install-recommends chromium) or set "
        "BROWSER_PATH; HTML export works without it."
    )


_server_users = 0


@contextmanager
def image_server() -> Iterator[None]:
    """One kaleido browser for every static image made inside the block (re-entrant: an inner block reuses
    the outer block's browser)."""
    global _server_users
    import kaleido

    if _server_users == 0:
        kaleido.start_sync_server(path=find_browser(), mathjax=False, silence_warnings=True)
    _server_users += 1
    try:
        yield
    finally:
        _server_users -= 1
        if _server_users == 0:
            kaleido.stop_sync_server(silence_warnings=True)


def _static_image(fig: go.Figure, fmt: str, stem: str) -> bytes:
    import kaleido

    layout = fig.layout
    spec = fig.to_dict()
    for i, trace in enumerate(spec["data"]):
        trace.setdefault("uid", f"trace{i}")  # plotly.js would draw a random one into the SVG
    data = kaleido.calc_fig_sync(
        spec,
        opts=dict(
            format=fmt, width=layout.width, height=layout.height, scale=PNG_SCALE if fmt == "png" else 1
        ),
    )
    if fmt == "svg":
        data = _fixed_svg_ids(data, "wb" + re.sub(r"[^a-z0-9]", "", stem.lower()))
    return data


def _fixed_svg_ids(svg: bytes, token: str) -> bytes:
    """Replace the random id plotly.js gives each rendering (``defs-<uid>``, ``clip<uid>...``) by ``token``, so
    the same figure gives the same SVG bytes (and two figures inlined in one page keep distinct ids)."""
    found = re.search(rb'id="defs-([0-9a-z]+)"', svg)
    if not found:
        return svg
    uid = found.group(1)
    return re.sub(rb"(defs-|clip|legend)" + re.escape(uid), rb"\g<1>" + token.encode("ascii"), svg)


# ---------------------------------------------------------------------------------------------------- writing
def pack_folder_name(scenario: Scenario) -> str:
    """``figure_pack_<slug of the scenario name>``: ASCII lower-case letters, digits and underscores, cut at a
    word boundary after 80 characters."""
    text = unicodedata.normalize("NFKD", scenario.name).encode("ascii", "ignore").decode("ascii")
    slug = re.sub(r"[^a-z0-9]+", "_", text.lower()).strip("_")
    if len(slug) > MAX_SLUG:
        cut = slug[: MAX_SLUG + 1]
        slug = cut[: cut.rfind("_")] if "_" in cut else slug[:MAX_SLUG]
    return f"figure_pack_{slug or 'scenario'}"


def check_formats(formats) -> tuple[str, ...]:
    """The chosen figure formats, in the order of :data:`FORMATS` (a list, or one comma-separated string)."""
    if isinstance(formats, str):
        formats = tuple(f.strip() for f in formats.split(","))
    try:
        chosen = tuple(formats)
    except TypeError:
        raise InputError("formats", formats, f"a list of {', '.join(FORMATS)}") from None
    bad = [f for f in chosen if f not in FORMATS]
    if not chosen or bad or len(set(chosen)) != len(chosen):
        raise InputError("formats", list(chosen), f"one or more of {', '.join(FORMATS)}, each once")
    return tuple(f for f in FORMATS if f in chosen)


def _check_out_dir(out_dir, within) -> Path:
    if not isinstance(out_dir, str | os.PathLike) or not str(out_dir).strip():
        raise InputError("out_dir", out_dir, "a folder path is required")
    path = Path(out_dir)
    if within is not None:
        base = Path(within).resolve()
        target = (base / path).resolve()
        if target != base and base not in target.parents:
            raise InputError("out_dir", str(out_dir), f"a folder inside {base} (this path leads outside it)")
        path = target
    if path.exists() and not path.is_dir():
        raise InputError("out_dir", str(out_dir), "a folder (this path is an existing file)")
    return path


def pack_file_names(formats: Sequence[str], tables: Sequence[str] = TABLE_STEMS) -> list[str]:
    """The files a pack of these formats writes (``stages.csv`` only for a two-stage design), manifest last."""
    names = [f"{stem}.{fmt}" for stem in FIGURE_STEMS for fmt in check_formats(formats)]
    return names + [f"{stem}.csv" for stem in tables] + list(TEXT_FILES) + [MANIFEST]


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _earlier_pack(folder: Path) -> dict[str, str | None] | None:
    """The files an earlier pack recorded in the folder's manifest (name -> SHA-256, None while it was being
    written), or None when there is no manifest this workbench wrote."""
    path = folder / MANIFEST
    if path.is_symlink() or not path.is_file() or path.stat().st_size > MAX_MANIFEST_BYTES:
        return None
    try:
        doc = json.loads(path.read_bytes().decode("utf-8"))
    except (OSError, UnicodeDecodeError, ValueError, RecursionError):
        return None
    files = doc.get("files") if isinstance(doc, dict) and doc.get("workbench_pack") == MANIFEST_VERSION else None
    if not isinstance(files, dict):
        return None
    ok = all(
        isinstance(k, str) and Path(k).name == k and (v is None or (isinstance(v, str) and len(v) == 64))
        for k, v in files.items()
    )
    return files if ok else None


def _same_file(a: Path, b: Path) -> bool:
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


@dataclass
class _Plan:
    """What writing a pack into a folder will do, decided before anything is written (internal)."""

    folder: Path
    names: list[str]
    stale: list[str]  # files of an earlier pack, unchanged, that this pack does not write: removed
    earlier: dict[str, str | None]


def _plan(folder: Path, names: list[str], *, overwrite: bool, keep: Sequence) -> _Plan:
    """Check every name against what is in the folder: never a kept input, a link or a folder; an existing file
    only when an earlier pack wrote it and it is unchanged since, or with ``overwrite``."""
    kept = [Path(k) for k in keep]
    for name in names:
        if Path(name).name != name or name in ("", ".", ".."):
            raise InputError("file name", name, "a plain file name inside the export folder")
        target = folder / name
        if any(_same_file(target, k) for k in kept):
            raise InputError(
                "out_dir",
                str(folder),
                f"a folder where the pack does not replace its own input ({target} is the scenario read): "
                "choose another folder",
            )
        if target.is_symlink():
            raise InputError("file", str(target), f"a file inside {folder} (this one is a link)")
        if target.exists() and not target.is_file():
            raise InputError("file", str(target), "a file (a folder of that name is in the way)")
    earlier = _earlier_pack(folder) if folder.is_dir() else None
    existing = sorted(p.name for p in folder.iterdir()) if folder.is_dir() else []
    if existing and earlier is None and not overwrite:
        listed = ", ".join(existing[:5]) + (" ..." if len(existing) > 5 else "")
        raise InputError(
            "out_dir",
            str(folder),
            f"a new or empty folder, or one an earlier pack wrote ({MANIFEST}); this one holds {listed}: choose "
            "another folder, or overwrite (--overwrite) to replace the pack's files in it",
        )
    earlier = earlier or {}
    for name in names:
        target = folder / name
        if name == MANIFEST or overwrite or not target.exists():
            continue
        if name not in earlier:
            raise InputError(
                "file",
                str(target),
                "a file the pack may replace: this one was not written by an earlier pack (not in "
                f"{MANIFEST}); move it, choose another folder, or overwrite (--overwrite)",
            )
        if earlier[name] is not None and _sha256(target) != earlier[name]:
            raise InputError(
                "file",
                str(target),
                "a file the pack may replace: this one was changed since an earlier pack wrote it; move it, "
                "choose another folder, or overwrite (--overwrite)",
            )
    stale = [
        name
        for name, digest in earlier.items()
        if name not in names
        and (folder / name).is_file()
        and not (folder / name).is_symlink()
        and not any(_same_file(folder / name, k) for k in kept)
        and digest is not None
        and _sha256(folder / name) == digest
    ]
    return _Plan(folder, names, stale, earlier)


def _prepare(folder: Path) -> list[Path]:
    """Create the folder (and its missing parents) and prove it writable with a probe file; returns the folders
    created, so that they can be removed again if the pack is not written."""
    created = [p for p in [folder, *folder.parents] if not p.exists()][::-1]
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, probe = tempfile.mkstemp(dir=folder, prefix=".write-check-")
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        _remove_empty(created)
        raise InputError(
            "out_dir", str(folder), f"a folder this user can create and write to ({exc.strerror or exc})"
        ) from None
    return created


def _remove_empty(created: list[Path]) -> None:
    for path in reversed(created):
        try:
            path.rmdir()
        except OSError:
            return


class _Writer:
    """Writes the planned files into one folder only, atomically, and records them in the manifest: first as
    being written (so an interrupted pack is still known as one), at the end with each file's SHA-256."""

    def __init__(self, plan: _Plan, scenario_name: str):
        self.plan = plan
        self.folder = plan.folder.resolve()
        self.scenario_name = scenario_name
        self.written: list[Path] = []
        self.digests: dict[str, str] = {}
        pending = {**{k: v for k, v in plan.earlier.items() if (self.folder / k).exists()}}
        pending.update(dict.fromkeys((n for n in plan.names if n != MANIFEST), None))
        self._manifest(pending)

    def _target(self, name: str) -> Path:
        target = self.folder / name
        if target.is_symlink() or target.resolve().parent != self.folder:
            raise InputError("file", str(target), f"a file inside {self.folder} (this one is a link)")
        return target

    def write(self, name: str, data: bytes | str) -> Path:
        if name not in self.plan.names or name == MANIFEST:
            raise InputError("file name", name, "one of the names checked before writing")
        target = self._target(name)
        data = data.encode("utf-8") if isinstance(data, str) else data
        write_atomic(target, data)
        self.digests[name] = hashlib.sha256(data).hexdigest()
        self.written.append(target)
        return target

    def finish(self) -> list[Path]:
        for name in self.plan.stale:
            (self.folder / name).unlink(missing_ok=True)
        self._manifest(dict(self.digests))
        self.written.append(self.folder / MANIFEST)
        return self.written

    def _manifest(self, files: dict) -> None:
        doc = {
            "workbench_pack": MANIFEST_VERSION,
            "scenario": self.scenario_name,
            "note": "Files written by the workbench's figure pack, with their SHA-256. A later pack replaces "
            "only these, and only while unchanged.",
            "files": files,
        }
        write_atomic(self._target(MANIFEST), (json.dumps(doc, indent=1, sort_keys=True) + "\n").encode("utf-8"))


def export_figure_pack(
    scenario: Scenario,
    out_dir: str | os.PathLike,
    *,
    formats: Sequence[str] = FORMATS,
    pack: FigurePack | None = None,
    within: str | os.PathLike | None = None,
    progress: Callable[[int, int], None] | None = None,
    overwrite: bool = False,
    keep: Sequence[str | os.PathLike] = (),
) -> list[Path]:
    """Compute the scenario's figure pack and write it into ``out_dir``; the folder is checked first.

    Parameters
    ----------
    scenario : Scenario
    out_dir : path
        The folder to write into: new, empty, or one an earlier pack wrote (see the module's docstring); created
        if needed. Refused when it is an existing file, when it cannot be written, or, with ``within``, when it
        leads outside ``within``.
    formats : sequence of {"png", "svg", "pdf", "html"}
        Figure formats (also "png,svg" as one string).
    pack : FigurePack, optional
        A pack already built from this same scenario (saves recomputing it).
    within : path, optional
        A folder ``out_dir`` must stay inside (a relative ``out_dir`` is taken relative to it).
    progress : callable(done, total), optional
        Monte Carlo progress, when the pack is computed here.
    overwrite : bool
        Replace files in the way that no earlier pack wrote, or that were changed since.
    keep : sequence of paths
        Files never replaced, even with ``overwrite`` (the scenario file read, for one).

    Returns
    -------
    list of pathlib.Path
        The files written, in the order written, the manifest last.
    """
    formats = check_formats(formats)
    check_progress(progress)
    if not isinstance(overwrite, bool):
        raise InputError("overwrite", overwrite, "True or False")
    keep = [keep] if isinstance(keep, str | os.PathLike) else list(keep)
    if not all(isinstance(k, str | os.PathLike) for k in keep):
        raise InputError("keep", keep, "a list of file paths")
    folder = _check_out_dir(out_dir, within)
    if pack is not None and (not isinstance(pack, FigurePack) or pack.scenario != scenario):
        raise InputError("pack", type(pack).__name__, "a FigurePack built from this same scenario")
    static = [f for f in formats if f in STATIC_FORMATS]
    # every check on the folder before any work: nothing is computed for a pack that cannot be written
    _plan(folder, pack_file_names(formats), overwrite=overwrite, keep=keep)
    if static:
        find_browser()
    created = _prepare(folder)
    try:
        if pack is None:
            pack = build_figure_pack(scenario, progress=progress)
    except BaseException:
        _remove_empty(created)
        raise
    plan = _plan(folder, pack_file_names(formats, list(pack.tables)), overwrite=overwrite, keep=keep)
    writer = _Writer(plan, pack.scenario.name)
    svgs: dict[str, str] = {}
    with image_server() if static else _nothing():
        for stem, fig in pack.figures.items():
            for fmt in formats:
                if fmt == "html":
                    page = fig.to_html(include_plotlyjs=True, full_html=True, div_id=f"workbench-{stem}")
                    writer.write(f"{stem}.html", page)
                    continue
                data = _static_image(fig, fmt, stem)
                writer.write(f"{stem}.{fmt}", data)
                if fmt == "svg":
                    svgs[stem] = data.decode("utf-8")
    for stem, table in pack.tables.items():
        writer.write(f"{stem}.csv", table_csv(table))
    writer.write("tables.xlsx", tables_xlsx(pack.tables))
    writer.write("cautions.txt", _cautions_text(pack))
    writer.write("sources.txt", _sources_text(pack))
    writer.write("scenario.toml", pack.scenario.to_toml())
    writer.write("summary.html", _summary_html(pack, formats, svgs))
    return writer.finish()


@contextmanager
def _nothing() -> Iterator[None]:
    yield


def _cautions_text(pack: FigurePack) -> str:
    lines = [f"Cautions for: {pack.scenario.name}", ""]
    lines += [f"- {c}" for c in pack.cautions]
    return "\n".join(lines) + "\n"


def _sources_text(pack: FigurePack) -> str:
    limits = pack.scenario.limits_table()
    lines = [f"Data sources for: {pack.scenario.name}", "", "Discharge limits:"]
    for source in sorted(set(limits["source"])):
        metals = ", ".join(sorted(set(limits.loc[limits["source"] == source, "metal"])))
        lines.append(f"- {source} ({metals})")
    if "note" in limits.attrs:
        lines.append(f"  {limits.attrs['note']}")
    lines += [
        "",
        "Thermodynamic constants that matter for this water (species carrying >= 1 % of a component,",
    ]
    lines += ["solids that form, Kw), by the source each value follows:"]
    for key, row in pack.sources.iterrows():
        if row["role"] == "constants":
            lines.append(f"- [{key}] {row['citation']}")
            lines.append(f"  {row['rows']} constant{'' if row['rows'] == 1 else 's'}: {row['names']}")
    via = pack.sources[pack.sources["role"] == "read via"]
    if len(via):
        lines += ["", "Secondary sources through which some of those values were read:"]
        lines += [f"- [{key}] {row['citation']}" for key, row in via.iterrows()]
    lines += ["", "Activity model:"]
    for key, row in pack.sources[pack.sources["role"] == "activity model"].iterrows():
        lines.append(f"- [{key}] {row['citation']}")
    return "\n".join(lines) + "\n"


_PAGE_STYLE = (
    "body{font-family:sans-serif;max-width:1100px;margin:2em auto;color:#222}"
    "table{border-collapse:collapse;font-size:90%;margin:0.5em 0 1.5em}"
    "td,th{border:1px solid #bbb;padding:2px 6px;text-align:right}"
    ".caution{border:2px solid #D55E00;padding:0.5em 1em;background:#fff6ef}"
    "figure{margin:1em 0 2em}figcaption{font-size:90%}figure svg{max-width:100%;height:auto}"
)


def _summary_html(pack: FigurePack, formats: tuple[str, ...], svgs: dict[str, str]) -> str:
    e = html.escape
    s, design = pack.scenario, pack.design
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{e(s.name or 'Scenario')}: figure pack</title>",
        f"<style>{_PAGE_STYLE}</style></head><body>",
        f"<h1>{e(s.name or 'Scenario')}</h1>",
        '<p class="caution"><strong>Caution.</strong> Theoretical equilibrium: confirm with jar tests on the real '
        "wastewater. The local permit and a licensed engineer govern. Full list below and in cautions.txt.</p>",
        "<h2>Result</h2>",
        f"<p>{e(_result_line(design))}</p>",
        f"<p>{e(_conditions(s, design, s.limits_table()))}</p>",
        "<h2>Figures</h2>",
    ]
    for stem, caption in pack.captions.items():
        links = " | ".join(f'<a href="{stem}.{fmt}">{fmt.upper()}</a>' for fmt in formats)
        parts.append("<figure>")
        if stem in svgs:
            parts.append(svgs[stem][svgs[stem].index("<svg") :])
        elif "png" in formats:
            parts.append(f'<img src="{stem}.png" alt="{e(" ".join(caption))}" style="max-width:100%">')
        else:  # no image to show: the caption as text, the figure behind the links
            parts.append(f"<p>{e(' '.join(caption))}</p>")
        parts.append(f"<figcaption>Caption printed in the figure. Files: {links}</figcaption></figure>")
    parts.append('<h2>Tables</h2><p>All of them in one workbook: <a href="tables.xlsx">tables.xlsx</a>.</p>')
    for stem, table in pack.tables.items():
        parts.append(f'<h3>{e(stem.replace("_", " "))} (<a href="{stem}.csv">{stem}.csv</a>)</h3>')
        shown = table.drop(columns=[c for c in ("source",) if c in table.columns])  # citations: see Sources
        parts.append('<div style="overflow-x:auto">')
        parts.append(shown.to_html(index=table.index.name is not None, na_rep="", border=0))
        parts.append("</div>")
    parts.append("<h2>Cautions</h2><ul>")
    parts += [f"<li>{e(c)}</li>" for c in pack.cautions]
    parts.append("</ul><h2>Sources</h2><ul>")
    for source in sorted(set(s.limits_table()["source"])):
        parts.append(f"<li>Limits: {e(source)}</li>")
    parts += [
        f"<li>[{e(key)}] {e(row['citation'])} <em>({e(row['role'])})</em></li>"
        for key, row in pack.sources.iterrows()
    ]
    parts.append("</ul>")
    parts.append(
        '<p>Inputs: <a href="scenario.toml">scenario.toml</a> (reload it to regenerate this pack).</p>'
    )
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"
