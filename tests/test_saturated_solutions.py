"""Charge-balance mode: saturated hydroxides in pure water against published and textbook values."""

import numpy as np
import pytest

from workbench.chemistry import solver, tableau


def _saturate(component, temperature_c=25.0):
    tab = tableau.build((component,), temperature_c, "fresh")
    t = np.zeros(len(tab.components))
    t[tab.component(component)] = 0.1  # far more than dissolves: the solid stays present
    return tab, solver.solve(tab, t, None, ph_guess=9.0)


def test_saturated_brucite_ph():
    # common practice / textbook value: saturated Mg(OH)2 in pure water has pH about 10.4-10.5 at 25 C
    tab, eq = _saturate("Mg^2+")
    assert 10.4 <= eq.ph[0] <= 10.5
    assert eq.solid_amount[0, tab.solids.index("Mg(OH)2 (brucite)")] > 0


def test_saturated_lime_ph():
    # Bates, Bower & Smith (1956) J. Res. NBS 56, 305: saturated Ca(OH)2 pH 12.45 at 25 C; falls by 0.033 per C
    tab, eq = _saturate("Ca^2+")
    assert eq.ph[0] == pytest.approx(12.45, abs=0.05)
    _, warm = _saturate("Ca^2+", 35.0)
    # the published coefficient is -0.033 pH/C; portlandite's enthalpy is a single study, so allow +-40 %
    assert -0.046 <= (warm.ph[0] - eq.ph[0]) / 10.0 <= -0.020


def test_charge_balance_is_closed():
    tab, eq = _saturate("Ca^2+")
    assert abs(eq.conc[0] @ tab.z) < 1e-10 * (eq.conc[0] @ np.abs(tab.z))  # the solver verifies 1e-10
