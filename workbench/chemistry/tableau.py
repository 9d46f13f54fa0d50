"""The equilibrium tableau of one water: which components, species and solids take part, at one temperature.

A tableau is built once per set of components present, solid choice and temperature (and cached), so that the
solver only does arithmetic. Species and solids are kept only when every component they contain is present.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, replace

import numpy as np

from workbench.chemistry import database
from workbench.chemistry import water_properties as wp

SOLID_CHOICES = ("fresh", "aged", "none")


@dataclass(frozen=True)
class Tableau:
    """Stoichiometry and constants for one system.

    Attributes
    ----------
    components : tuple of str
        Components taking part; ``"H+"`` is always first.
    species : tuple of str
        Aqueous species, including each free component (and OH-).
    a : ndarray, shape (n_species, n_components)
        Species stoichiometry over the components.
    log_k : ndarray, shape (n_species,)
        Formation constants at the tableau's temperature, I = 0. [log10]
    z : ndarray, shape (n_species,)
        Species charges.
    solids : tuple of str
        Candidate solids.
    b : ndarray, shape (n_solids, n_components)
        Solid stoichiometry.
    log_ks : ndarray, shape (n_solids,)
        Formation constants of the solids from components (= -log10 Ksp as written). [log10]
    temperature_c : float
        Temperature. [°C]
    davies_a : float
        Debye-Hückel A at the temperature (log10, mol/L basis).
    species_index, solid_index : ndarray
        Positions of the species and solids in :class:`database.ThermoData`.
    """

    components: tuple[str, ...]
    species: tuple[str, ...]
    a: np.ndarray
    log_k: np.ndarray
    z: np.ndarray
    solids: tuple[str, ...]
    b: np.ndarray
    log_ks: np.ndarray
    temperature_c: float
    davies_a: float
    species_index: np.ndarray
    solid_index: np.ndarray
    component_index: np.ndarray

    def component(self, name: str) -> int:
        """Position of a component in this tableau."""
        return self.components.index(name)

    def with_solubility_shift(self, component: str, delta_log_k: float) -> Tableau:
        """A copy in which every solid containing ``component`` is ``delta_log_k`` more soluble (its solubility
        product multiplied by 10**delta_log_k): the apparent solubility shift fitted to jar tests. [log10 units]"""
        j = self.component(component)
        log_ks = self.log_ks - np.where(self.b[:, j] > 0, float(delta_log_k), 0.0)
        return replace(self, log_ks=log_ks)

    def with_log_beta(self, log_beta: np.ndarray) -> Tableau:
        """A copy with constants taken from a full vector of formation constants (e.g. a Monte Carlo sample)."""
        return Tableau(
            self.components,
            self.species,
            self.a,
            log_beta[self.species_index],
            self.z,
            self.solids,
            self.b,
            log_beta[self.solid_index],
            self.temperature_c,
            self.davies_a,
            self.species_index,
            self.solid_index,
            self.component_index,
        )


def build(components: tuple[str, ...], temperature_c: float = 25.0, solids: str = "fresh") -> Tableau:
    """Tableau for the given components (``"H+"`` is added), temperature and solid choice.

    Parameters
    ----------
    components : tuple of str
        Components present (names as in data/thermo/components.csv).
    temperature_c : float
        Temperature. [°C]
    solids : {"fresh", "aged", "none"}
        ``"fresh"``: the amorphous/freshly precipitated solids that form in a reactor (default for design);
        ``"aged"``: the stable oxides/crystalline solids (a thermodynamic lower bound); ``"none"``: no solids.
    """
    if solids not in SOLID_CHOICES:
        raise ValueError(f"solids: got {solids!r}; allowed {SOLID_CHOICES}")
    data = database.load()
    wanted = ["H+"] + sorted((c for c in set(components) if c != "H+"), key=data.components.index)
    return _build(tuple(wanted), round(float(temperature_c), 9), solids)


@functools.lru_cache(maxsize=64)
def _build(components: tuple[str, ...], temperature_c: float, solids: str) -> Tableau:
    data = database.load()
    cidx = np.array([data.components.index(c) for c in components])
    absent = np.ones(len(data.components), bool)
    absent[cidx] = False
    uses_absent = (np.abs(data.composition[:, absent]) > 0).any(axis=1)
    allowed_form = {"fresh": ("fresh", "both"), "aged": ("aged", "both"), "none": ()}[solids]
    forms = np.array(data.forms, dtype=object)
    sp = np.flatnonzero(~data.is_solid & ~data.is_gas & ~uses_absent)
    so = np.flatnonzero(data.is_solid & ~uses_absent & np.isin(forms, allowed_form))
    log_beta = data.log_beta(temperature_c)
    comp = data.composition[:, cidx]
    return Tableau(
        components=components,
        species=tuple(data.names[i] for i in sp),
        a=comp[sp],
        log_k=log_beta[sp],
        z=data.charge[sp],
        solids=tuple(data.names[i] for i in so),
        b=comp[so],
        log_ks=log_beta[so],
        temperature_c=temperature_c,
        davies_a=float(wp.davies_a(temperature_c)),
        species_index=sp,
        solid_index=so,
        component_index=cidx,
    )
