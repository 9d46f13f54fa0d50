"""Integrity of data/: schema, provenance, units and consistency of the thermodynamic tables."""

import csv
import math

import numpy as np
import periodictable
import pytest

from workbench._paths import data_dir
from workbench.chemistry import database, tableau
from workbench.chemistry.formula import element_counts, molar_mass

DATA = data_dir()


def _rows(path):
    with open(path, encoding="utf-8") as fh:
        return list(csv.DictReader(ln for ln in fh if not ln.startswith("#")))


def _reference_keys():
    return {r["key"] for r in _rows(DATA / "references.csv")}


# data/demo/ holds the invented demo plant (scenario, jar tests): no source to cite, but each file says it is invented
SOURCED = sorted(p for p in DATA.rglob("*.csv") if p.parent != DATA / "demo")


def test_demo_data_say_they_are_invented():
    files = sorted((DATA / "demo").iterdir())
    assert files
    for path in files:
        head = "".join(path.read_text(encoding="utf-8").splitlines(keepends=True)[:3])
        assert "INVENTED" in head, f"{path.name} does not say in its first lines that it is invented"


@pytest.mark.parametrize("path", SOURCED, ids=lambda p: str(p.relative_to(DATA)))
def test_every_row_names_a_source_that_resolves(path):
    keys = _reference_keys()
    rows = _rows(path)
    assert rows, f"{path} is empty"
    if path.name == "references.csv":
        assert all(r["citation"].strip() for r in rows)
        return
    assert "source" in rows[0], f"{path.name} has no source column"
    for line, r in enumerate(rows, start=2):
        assert r["source"].strip() in keys, (
            f"{path.name} row {line}: source {r['source']!r} not in references.csv"
        )
        if r.get("read_via", "").strip():
            assert r["read_via"].strip() in keys, (
                f"{path.name} row {line}: read_via {r['read_via']!r} unknown"
            )


def test_quality_tags_and_memory_rows_are_marked():
    for table in ("aqueous", "solids", "gases"):
        for r in _rows(DATA / "thermo" / f"{table}.csv"):
            assert r["quality"] in database.QUALITY_TAGS
            assert (r["source"] == "memory") == (r["quality"] == "memory"), r["name"]


def test_no_duplicate_reaction_or_name():
    data = database.load()
    reactions = [(r.table, r.reaction) for r in data.rows]
    dup_rx = {x for x in reactions if reactions.count(x) > 1}
    # two polymorphs share a reaction string by design (e.g. ZnO vs Zn(OH)2 forms); names must then differ
    for table, rx in dup_rx:
        names = [r.name for r in data.rows if (r.table, r.reaction) == (table, rx)]
        assert len(set(names)) == len(names)
    assert len(set(data.names)) == len(data.names)


def test_atomic_weights_match_periodictable():
    # IUPAC/CIAAW standard atomic weights as shipped by the periodictable package (independent copy)
    for r in _rows(DATA / "atomic_weights.csv"):
        ref = getattr(periodictable, r["element"]).mass
        assert float(r["atomic_weight"]) == pytest.approx(ref, abs=0.011), r["element"]


def test_solid_formula_mass_equals_reaction_mass():
    # mass is conserved in each dissolution reaction, so the formula's molar mass must equal the mass built from
    # the reaction's components and water: catches a reaction that does not match its solid
    data = database.load()
    weights = {r["element"]: float(r["atomic_weight"]) for r in _rows(DATA / "atomic_weights.csv")}
    for i, row in enumerate(data.rows):
        if row.table != "solids":
            continue
        k = len(data.components) + i
        assert molar_mass(row.formula, weights) == pytest.approx(data.molar_mass_g_mol[k], rel=1e-9), row.name


def test_species_charge_from_components_matches_its_name():
    data = database.load()
    for i, row in enumerate(data.rows):
        if row.table != "aqueous":
            continue
        name = row.name
        if name.endswith("(aq)") or name[-1] not in "+-":
            expected = 0
        else:
            sign = 1 if name[-1] == "+" else -1
            digits = name.split("^")[-1][:-1] if "^" in name else ""
            expected = sign * (int(digits) if digits else 1)
        assert data.charge[len(data.components) + i] == expected, name


def test_species_elements_balance():
    # element balance of each aqueous species: formula elements == component elements + H2O - H+
    data = database.load()
    comp_formula = {r["component"]: r["formula"] for r in _rows(DATA / "thermo" / "components.csv")}
    skip = {"Y^4-", "Cit^3-"}  # ligand species are named with Y / Cit, not their elements
    for i, row in enumerate(data.rows):
        if row.table != "aqueous":
            continue
        k = len(data.components) + i
        comp = data.composition[k]
        if any(abs(comp[j]) > 0 for j, c in enumerate(data.components) if c in skip):
            continue
        built = {}
        for j, c in enumerate(data.components):
            for el, n in element_counts(comp_formula[c]).items():
                built[el] = built.get(el, 0.0) + comp[j] * n
        built["H"] = built.get("H", 0.0) + 2 * data.water_count[k]
        built["O"] = built.get("O", 0.0) + data.water_count[k]
        formula = {el: n for el, n in element_counts(row.name).items()}
        built = {el: n for el, n in built.items() if abs(n) > 1e-9}
        assert built == pytest.approx(formula), row.name


def test_temperature_functions_agree_with_table_at_25c():
    # Plummer & Busenberg (1982) functions must reproduce the tabulated 25 C values they replace
    data = database.load()
    k25 = data.row_log_k(25.0 + 1e-9)
    for i, row in enumerate(data.rows):
        if i in data.t_functions:
            assert k25[i] == pytest.approx(row.log_k, abs=0.01), row.name


def test_ionic_strength_correction_of_edta_rows():
    # Davies correction 0.1 M -> 0 for Cu2+ + Y4- = CuY2- (sum nu z^2 = 4 - 4 - 16 = -16 -> +16 * A * D(0.1));
    # checked by hand: D(0.1) = sqrt(0.1)/(1+sqrt(0.1)) - 0.03 = 0.21028, A(20 C) ~ 0.5066
    data = database.load()
    i = next(i for i, r in enumerate(data.rows) if r.name == "CuY^2-")
    from workbench.chemistry import water_properties as wp

    d = math.sqrt(0.1) / (1 + math.sqrt(0.1)) - 0.3 * 0.1
    expected = 18.80 + 16 * float(wp.davies_a(20.0)) * d
    assert data._row_log_k25[i] == pytest.approx(expected, abs=1e-9)
    assert 20.4 < expected < 20.6


def test_loader_refuses_a_row_without_source(tmp_path):
    import shutil

    shutil.copytree(DATA, tmp_path / "data")
    p = tmp_path / "data" / "thermo" / "aqueous.csv"
    text = p.read_text(encoding="utf-8").replace(",powell2013,", ",,", 1)
    p.write_text(text, encoding="utf-8")
    with pytest.raises(database.DataError, match="source"):
        database.load.__wrapped__(str(tmp_path / "data"))


def test_solid_forms_cover_each_metal():
    # every metal has at least one solid for the fresh choice and one for the aged choice
    data = database.load()
    forms = np.array(data.forms, dtype=object)
    for comp in (
        "Cu^2+",
        "Ni^2+",
        "Zn^2+",
        "Cd^2+",
        "Pb^2+",
        "Cr^3+",
        "Fe^3+",
        "Fe^2+",
        "Al^3+",
        "Mn^2+",
        "Co^2+",
        "Ag+",
    ):
        j = data.components.index(comp)
        has = data.is_solid & (data.composition[:, j] > 0)
        assert (has & np.isin(forms, ("fresh", "both"))).any(), comp
        assert (has & np.isin(forms, ("aged", "both"))).any(), comp


# data/thermo/README.md §8: the carbonates that precipitate within a day at plant conditions (Köhler et al. 2007;
# Mater. Res. Bull. 39 (2004) 1939; Böttcher 1995) are in the default set; smithsonite (hydrothermal synthesis) and
# malachite (an amorphous hydroxycarbonate first, for days to weeks: Angel et al. 2021) are not
DOCUMENTED_FRESH_CARBONATES = {
    "CaCO3 (calcite)",
    "CdCO3 (otavite)",
    "PbCO3 (cerussite)",
    "1/3 Pb3(CO3)2(OH)2 (hydrocerussite)",
    "1/5 Zn5(OH)6(CO3)2 (hydrozincite)",
    "NiCO3 (precipitated; phase not stated)",
    "CoCO3 (precipitated; phase not stated)",
    "MnCO3 (rhodochrosite)",
    "FeCO3 (siderite)",
    "Ag2CO3",
}
DOCUMENTED_AGED_ONLY_CARBONATES = {"ZnCO3 (smithsonite)", "1/2 Cu2(OH)2CO3 (malachite)"}


def test_the_default_solids_are_the_documented_fresh_set():
    data = database.load()
    solids = [r for r in data.rows if r.table == "solids"]
    carbonates = {r.name for r in solids if "CO3" in r.formula}
    fresh = {r.name for r in solids if r.form in ("fresh", "both")}
    assert carbonates & fresh == DOCUMENTED_FRESH_CARBONATES
    assert carbonates - fresh == DOCUMENTED_AGED_ONLY_CARBONATES
    readme = (DATA / "thermo" / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("## 8. Fresh or crystalline") :]
    for word in (
        "Otavite",
        "Cerussite",
        "hydrocerussite",
        "Hydrozincite",
        "Smithsonite",
        "Malachite",
        "Rhodochrosite",
    ):
        assert word in section
    # the tableau the core builds by default admits exactly these
    tab = tableau.build(("Cu^2+", "Zn^2+", "Pb^2+", "Cd^2+", "CO3^2-"), 25.0, "fresh")
    assert "ZnCO3 (smithsonite)" not in tab.solids and "1/2 Cu2(OH)2CO3 (malachite)" not in tab.solids
    assert {
        "1/5 Zn5(OH)6(CO3)2 (hydrozincite)",
        "CdCO3 (otavite)",
        "1/3 Pb3(CO3)2(OH)2 (hydrocerussite)",
    } <= set(tab.solids)
    assert "Cu(OH)2 (fresh precipitate)" in tab.solids and "Cu(OH)2 (crystalline)" not in tab.solids
