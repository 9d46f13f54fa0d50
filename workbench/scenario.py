"""Scenario files: the workbench's own human-readable TOML schema (read with tomllib, never executed).

A scenario holds what an engineer entered: ``version``, ``name`` and an ``[influent]`` table whose keys are the
:class:`~workbench.treatment.water.Water` fields (metals under ``[influent.metals_mg_l]``). Unknown keys are
refused with their name, so a typo is never silently ignored. Later layers add their own tables (limits,
reagent, flow, calibration, Monte Carlo settings).
"""

from __future__ import annotations

import tomllib
from dataclasses import fields
from pathlib import Path

from workbench._paths import data_dir
from workbench.errors import InputError
from workbench.treatment.water import Water

SCHEMA_VERSION = 1
MAX_FILE_BYTES = 1_000_000


def demo_scenario_path() -> Path:
    """Path of the bundled demo scenario (an invented plant)."""
    return data_dir() / "demo" / "demo_scenario.toml"


def read_scenario(path: str | Path) -> dict:
    """Read and validate a scenario file. Returns {"version", "name", "water"}; the file is only read."""
    path = Path(path)
    if not path.is_file():
        raise InputError("scenario file", str(path), "an existing .toml file is required")
    size = path.stat().st_size
    if size > MAX_FILE_BYTES:
        raise InputError(
            "scenario file", str(path), f"files up to {MAX_FILE_BYTES} bytes are accepted ({size} given)"
        )
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise InputError("scenario file", str(path), "UTF-8 text is required") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError("scenario file", str(path), f"valid TOML is required ({exc})") from None
    return parse_scenario(doc)


def parse_scenario(doc: dict) -> dict:
    """Validate a scenario document (already parsed TOML)."""
    version = doc.get("version")
    if version != SCHEMA_VERSION:
        raise InputError("version", version, f"this workbench reads scenario version {SCHEMA_VERSION}")
    influent = doc.get("influent")
    if not isinstance(influent, dict):
        raise InputError("influent", influent, "an [influent] table is required")
    known = {f.name for f in fields(Water)}
    unknown = sorted(set(influent) - known)
    if unknown:
        raise InputError(
            f"influent.{unknown[0]}", influent[unknown[0]], f"known keys are {', '.join(sorted(known))}"
        )
    name = doc.get("name", "")
    water = Water(**{"name": name, **influent})
    return {"version": version, "name": name, "water": water}


def demo_water() -> Water:
    """The demo plant's influent (invented)."""
    return read_scenario(demo_scenario_path())["water"]
