"""Checks on an influent analysis and the air an open reactor exchanges CO2 with.

* :func:`ion_balance`: cations against anions of the analysis as entered, with the acceptance rule of
  ``data/analysis/ion_balance.csv``. An analysis that does not close is reported (meq/L and %) rather than its gap
  being filled silently by the dose module's charge-balance closure.
* :func:`atmospheric_co2`: the CO2 partial pressure of air (``data/analysis/atmosphere.csv``, NOAA GML global
  annual mean) for a reactor open to the air, and :func:`check_reactor` / :func:`check_pco2` for the options.
"""

from __future__ import annotations

import csv
import functools
import math
import numbers
from dataclasses import dataclass

from workbench._paths import data_dir
from workbench.chemistry import database, tableau
from workbench.chemistry import water_properties as wp
from workbench.errors import DataError, InputError
from workbench.treatment.water import CACO3_EQ_G, MAJOR_IONS, METALS, Water

#: Reactor choices: closed (no gas exchange) or open to the air (CO2 at equilibrium with it).
REACTORS = ("closed", "open")
#: Components whose charge depends on the pH (weak acids and bases entered as the compound): counted at the
#: charge their free forms carry at the measured pH.
PH_DEPENDENT = ("NH3", "Y^4-", "Cit^3-")
#: Components counted at their charge as entered (strong-acid anions and cations).
_FIXED_CHARGE = tuple(c for c in MAJOR_IONS.values() if c not in PH_DEPENDENT)


def _rows(name: str) -> list[dict[str, str]]:
    path = data_dir() / "analysis" / name
    with open(path, encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(ln for ln in fh if not ln.startswith("#")))
    if not rows:
        raise DataError(f"{path.name} is empty")
    return rows


@dataclass(frozen=True)
class Rule:
    """The ion balance's acceptance rule: ``tolerance_percent`` on the % difference, with its provenance."""

    tolerance_percent: float
    source: str
    quality: str
    note: str


@functools.lru_cache(maxsize=1)
def acceptance_rule() -> Rule:
    """The acceptance rule of the ion balance (data/analysis/ion_balance.csv)."""
    row = next((r for r in _rows("ion_balance.csv") if r["quantity"] == "percent_difference"), None)
    if row is None:
        raise DataError("ion_balance.csv has no percent_difference row")
    return Rule(float(row["tolerance"]), row["source"], row["quality"], row["note"])


@dataclass(frozen=True)
class IonBalance:
    """Cations against anions of an analysis. [meq/L]

    Attributes
    ----------
    cations_meq_l, anions_meq_l : float
        Sums of the positive and negative charges. [meq/L]
    difference_meq_l : float
        Cations minus anions. [meq/L]
    difference_percent : float
        100 (cations - anions) / (cations + anions); 0 for an analysis with no ions. [%]
    tolerance_percent : float
        The acceptance rule's band. [%]
    acceptable : bool
        Whether |difference_percent| is within the band.
    ph : float
        pH the H+, OH- and the weak acids and bases were counted at. [-]
    terms : dict
        Each ion's charge contribution, signed (cations +, anions -). [meq/L]
    rule_source : str
        Source key and quality tag of the rule.
    """

    cations_meq_l: float
    anions_meq_l: float
    difference_meq_l: float
    difference_percent: float
    tolerance_percent: float
    acceptable: bool
    ph: float
    terms: dict
    rule_source: str

    def message(self) -> str:
        """One sentence: the sums, the difference in meq/L and %, and the rule."""
        return (
            f"cations {self.cations_meq_l:.3g} meq/L, anions {self.anions_meq_l:.3g} meq/L: difference "
            f"{self.difference_meq_l:+.3g} meq/L ({self.difference_percent:+.1f} %; accepted within "
            f"±{self.tolerance_percent:g} %, {self.rule_source})"
        )


def ion_balance(water: Water) -> IonBalance:
    """Cation-anion balance of an analysis as entered.

    Counted: every metal at the charge of the ion it is entered as (Fe = Fe3+, Al3+, Cr3+, Fe(II) = Fe2+, Ag+, the
    others 2+); Na+, Ca2+, Mg2+; SO4 2-, Cl-, F- as entered; H+ and OH- from the measured pH (activity taken as
    concentration, as in Kirby & Cravotta 2005); the carbonate anions (HCO3- + 2 CO3 2-) that the alkalinity
    stands for at the measured pH; ammonia, EDTA and citrate at the charge their free forms carry at the
    measured pH (the tableau's protonation constants). Without a measured pH these are counted at pH 8.3 (the
    pH the alkalinity is read at). Activity corrections are left out: the check is on the analysis, not the model.

    Parameters
    ----------
    water : Water

    Returns
    -------
    IonBalance
        ``difference_percent = 100 (sum cations - sum anions) / (sum cations + sum anions)`` and whether it lies
        within the acceptance rule of data/analysis/ion_balance.csv.
    """
    if not isinstance(water, Water):
        raise InputError("water", type(water).__name__, "a workbench Water is required")
    data = database.load()
    ph = water.alkalinity_ph
    terms: dict[str, float] = {}
    totals = water.totals()
    for key in water.metals_mg_l:
        comp = METALS[key]
        terms[comp] = terms.get(comp, 0.0) + _charge(data, comp) * totals[comp] * 1000.0
    for comp in _FIXED_CHARGE:
        if comp in totals:
            terms[comp] = _charge(data, comp) * totals[comp] * 1000.0
    terms.update(_weak_charges(water, totals, ph))
    h = 10.0**-ph * 1000.0
    oh = 10.0 ** (ph - float(wp.pkw(water.temperature_c))) * 1000.0
    terms["H+"], terms["OH-"] = h, -oh
    if (
        water.alkalinity_mg_l_caco3 > 0
    ):  # HCO3- + 2 CO3 2- = alkalinity - OH- + H+ (Stumm & Morgan's definition)
        terms["HCO3- + CO3^2-"] = -(water.alkalinity_mg_l_caco3 / CACO3_EQ_G - oh + h)
    cations = sum(v for v in terms.values() if v > 0)
    anions = -sum(v for v in terms.values() if v < 0)
    rule = acceptance_rule()
    total = cations + anions
    percent = 100.0 * (cations - anions) / total if total > 0 else 0.0
    return IonBalance(
        cations_meq_l=cations,
        anions_meq_l=anions,
        difference_meq_l=cations - anions,
        difference_percent=percent,
        tolerance_percent=rule.tolerance_percent,
        acceptable=abs(percent) <= rule.tolerance_percent,
        ph=float(ph),
        terms=terms,
        rule_source=f"{rule.source}, {rule.quality}",
    )


def _charge(data, comp: str) -> float:
    return float(data.charges[data.components.index(comp)])


def _weak_charges(water: Water, totals: dict[str, float], ph: float) -> dict[str, float]:
    """Charge of ammonia, EDTA and citrate at the pH, from their protonated forms alone (no metal), ideal
    solution. [meq/L]

    Each form holds one ligand, so its share is ``10**(log_k - n_H pH)`` over the sum of these (the
    alpha-fractions of an acid-base system, e.g. Stumm & Morgan, ch. 3)."""
    out = {}
    for comp in PH_DEPENDENT:
        if comp not in totals:
            continue
        tab = tableau.build((comp,), water.temperature_c, "none")
        j = tab.component(comp)
        holds = tab.a[:, j] > 0
        if (tab.a[holds, j] != 1).any():  # a form with two ligands would need the mass balance solved
            raise DataError(
                f"{comp}: a species with more than one ligand; the ion balance counts one per form"
            )
        log_share = tab.log_k[holds] - tab.a[holds, 0] * ph
        share = 10.0 ** (log_share - log_share.max())
        share /= share.sum()
        out[comp] = float((share * tab.z[holds]).sum()) * totals[comp] * 1000.0
    return out


# ------------------------------------------------------------------------------------------------ air
@dataclass(frozen=True)
class AtmosphericCO2:
    """CO2 of air with its provenance."""

    mole_fraction_umol_mol: float
    uncertainty_umol_mol: float
    year: int
    source: str
    quality: str

    @property
    def pco2_atm(self) -> float:
        """Partial pressure at 1 atm of dry air. [atm]"""
        return self.mole_fraction_umol_mol * 1e-6

    @property
    def log_pco2(self) -> float:
        """[log10 atm]"""
        return math.log10(self.pco2_atm)


@functools.lru_cache(maxsize=1)
def atmospheric_co2() -> AtmosphericCO2:
    """The CO2 of air used for an open reactor (data/analysis/atmosphere.csv)."""
    row = next((r for r in _rows("atmosphere.csv") if r["quantity"] == "co2_mole_fraction"), None)
    if row is None:
        raise DataError("atmosphere.csv has no co2_mole_fraction row")
    return AtmosphericCO2(
        float(row["value"]), float(row["uncertainty"]), int(row["year"]), row["source"], row["quality"]
    )


def check_reactor(reactor) -> str:
    """A reactor choice, checked against :data:`REACTORS`."""
    if not isinstance(reactor, str) or reactor not in REACTORS:
        raise InputError(
            "reactor",
            reactor,
            "allowed closed (no gas exchange) or open (aerated: CO2 at equilibrium with the air)",
        )
    return reactor


MAX_PCO2_ATM = 1.0


def check_pco2(pco2_atm, reactor: str) -> float | None:
    """The CO2 partial pressure of an open reactor [atm]: the air's (data) when None; refused for a closed one."""
    if pco2_atm is None:
        return atmospheric_co2().pco2_atm if reactor == "open" else None
    if reactor != "open":
        raise InputError("pco2_atm", pco2_atm, "a CO2 partial pressure applies to reactor='open' only")
    if isinstance(pco2_atm, bool) or not isinstance(pco2_atm, numbers.Real) or not math.isfinite(pco2_atm):
        raise InputError(
            "pco2_atm", pco2_atm, f"a number greater than 0 and at most {MAX_PCO2_ATM:g} atm is required"
        )
    if not 0.0 < float(pco2_atm) <= MAX_PCO2_ATM:
        raise InputError("pco2_atm", pco2_atm, f"allowed greater than 0 and at most {MAX_PCO2_ATM:g} atm")
    return float(pco2_atm)
