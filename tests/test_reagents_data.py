"""data/reagents: every fact has a source that resolves and a quality tag; formulas, molar masses and the ions a
reagent adds agree with IUPAC atomic weights (periodictable) and with the trade's stoichiometric factors."""

import csv
import shutil

import periodictable
import pytest

from workbench._paths import data_dir
from workbench.chemistry import database
from workbench.chemistry.formula import element_counts
from workbench.errors import DataError
from workbench.treatment import reagents

DATA = data_dir()
FACT_COLUMNS = [
    ("source", "quality"),
    ("insoluble_source", "insoluble_quality"),
    ("density_source", "density_quality"),
    ("feed_source", "feed_quality"),
    ("ceiling_source", "ceiling_quality"),
]


def _rows(path):
    with open(path, encoding="utf-8") as fh:
        return list(csv.DictReader(ln for ln in fh if not ln.startswith("#")))


def test_every_reagent_fact_names_a_source_and_a_tag():
    keys = {r["key"] for r in _rows(DATA / "references.csv")}
    rows = _rows(DATA / "reagents" / "reagents.csv")
    assert [r["reagent"] for r in rows] == list(reagents.REAGENTS)
    for r in rows:
        for source, quality in FACT_COLUMNS:
            if not r[source].strip() and not r[quality].strip():
                assert source == "density_source", (r["reagent"], source)  # only the density may be absent
                continue
            assert r[source] in keys, (r["reagent"], source, r[source])
            assert r[quality] in database.QUALITY_TAGS, (r["reagent"], quality)
            assert (r[source] == "memory") == (r[quality] == "memory"), (r["reagent"], source)
    for r in _rows(DATA / "reagents" / "sludge.csv"):
        assert r["source"] in keys and r["quality"] in database.QUALITY_TAGS


@pytest.mark.parametrize("key", reagents.REAGENTS)
def test_molar_mass_from_formula_matches_iupac_atomic_weights(key):
    # IUPAC standard atomic weights through the periodictable package; data/atomic_weights.csv is abridged to
    # five significant figures, hence rel 1e-4
    reagent = reagents.get(key)
    assert reagent.molar_mass_g_mol == pytest.approx(periodictable.formula(reagent.formula).mass, rel=1e-4)


@pytest.mark.parametrize("key", reagents.REAGENTS)
def test_ions_added_balance_the_formula(key):
    # the formula = the components added + oxide/hydroxide (O and H beyond the components), and the components'
    # charge is what that oxide/hydroxide neutralises: +2 per extra O, -1 per extra H (O^2- + H2O = 2 OH-)
    data = database.load()
    comp_formula = {r["component"]: r["formula"] for r in _rows(DATA / "thermo" / "components.csv")}
    reagent = reagents.get(key)
    built, charge = {}, 0.0
    for comp, n in reagent.adds.items():
        for el, count in element_counts(comp_formula[comp]).items():
            built[el] = built.get(el, 0.0) + n * count
        charge += n * data.charges[data.components.index(comp)]
    formula = element_counts(reagent.formula)
    extra_o = formula.get("O", 0.0) - built.get("O", 0.0)
    extra_h = formula.get("H", 0.0) - built.get("H", 0.0)
    assert {el: n for el, n in formula.items() if el not in "OH"} == {
        el: n for el, n in built.items() if el not in "OH"
    }
    assert charge == pytest.approx(2 * extra_o - extra_h)


@pytest.mark.parametrize(
    ("key", "kg_per_kg_acidity"),
    # kg of pure reagent per kg of acidity as CaCO3, the trade's stoichiometric factors (computed from standard
    # atomic weights): hydrated lime 0.740, quicklime 0.560, caustic 0.799, Mg(OH)2 0.583, soda ash 1.06
    [
        ("lime", 0.740),
        ("quicklime", 0.560),
        ("caustic", 0.799),
        ("magnesium_hydroxide", 0.583),
        ("soda_ash", 1.06),
    ],
)
def test_stoichiometric_factor_per_acidity_as_caco3(key, kg_per_kg_acidity):
    reagent = reagents.get(key)
    data = database.load()
    # equivalents of base per mol: the charge of the cations added (soda ash: 2 Na+, CO3 takes up 2 H+)
    eq_per_mol = sum(
        n * data.charges[data.components.index(c)] for c, n in reagent.adds.items() if c != "CO3^2-"
    )
    caco3_per_eq = periodictable.formula("CaCO3").mass / 2.0
    factor = reagent.molar_mass_g_mol / eq_per_mol / caco3_per_eq
    assert factor == pytest.approx(kg_per_kg_acidity, abs=0.001 if kg_per_kg_acidity < 1 else 0.01)


def test_default_purities_follow_their_sources():
    # hydrated lime 72-74 % CaO (National Lime Association): as Ca(OH)2 that is 95-98 % (IUPAC weights)
    ratio = periodictable.formula("Ca(OH)2").mass / periodictable.formula("CaO").mass
    assert 0.72 * ratio - 0.005 <= reagents.get("lime").purity.value <= 0.74 * ratio
    assert 0.88 <= reagents.get("quicklime").purity.value <= 0.90  # Hoover 1940: 88-90 % available CaO
    caustic = reagents.get("caustic")
    assert caustic.purity.value == 0.50 and caustic.product_density.value == 1.52  # 50 % solution, SG 1.52
    assert caustic.insoluble_fraction_of_remainder.value == 0.0  # the rest of a solution is water
    for key in reagents.REAGENTS:
        assert 0.0 < reagents.get(key).purity.value <= 1.0


def test_loader_refuses_a_purity_outside_0_1_and_an_unknown_component(tmp_path):
    shutil.copytree(DATA, tmp_path / "data")
    path = tmp_path / "data" / "reagents" / "reagents.csv"
    text = path.read_text(encoding="utf-8")
    path.write_text(text.replace(",Ca(OH)2,Ca^2+:1,0.95,", ",Ca(OH)2,Ca^2+:1,1.5,", 1), encoding="utf-8")
    with pytest.raises(DataError, match="default_purity"):
        reagents.load.__wrapped__(str(tmp_path / "data"))
    path.write_text(text.replace(",Ca(OH)2,Ca^2+:1,", ",Ca(OH)2,Ca++:1,", 1), encoding="utf-8")
    with pytest.raises(DataError, match="unknown component"):
        reagents.load.__wrapped__(str(tmp_path / "data"))
