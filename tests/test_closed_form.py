"""Solver against the closed-form solubility of single metals, from published constants stated here.

With one hydroxide/oxide solid present and the pH fixed, [M] = *Ks0 [H+]^z, and the dissolved total is
C = sum_pq p * beta_pq [M]^p [H+]^-q (Baes & Mesmer 1976, ch. 2; Stumm & Morgan, Aquatic Chemistry, ch. 6).
The constants below are typed in from the published sources named beside them, independently of data/, so a
copying error in data/ or an arithmetic error in the solver makes these tests fail. Ideal activities
(I = 0 as published) and 25 C. Agreement required: 1e-6 relative.
"""

import numpy as np
import pytest

from workbench.chemistry import solver, tableau

# metal component, charge z, solid name, log *Ks0, {(p, q): log *beta_pq}, source
CASES = {
    "Zn fresh": (  # Powell et al. 2013 (IUPAC Zn report) hydrolysis; am-Zn(OH)2 12.48 (SC-Database 1964SAa)
        "Zn^2+",
        2,
        "Zn(OH)2 (amorphous)",
        12.48,
        {(1, 1): -8.96, (1, 2): -17.82, (1, 3): -28.05, (1, 4): -40.41, (2, 1): -7.9},
    ),
    "Zn aged": (
        "Zn^2+",
        2,
        "ZnO (zincite)",
        11.12,
        {(1, 1): -8.96, (1, 2): -17.82, (1, 3): -28.05, (1, 4): -40.41, (2, 1): -7.9},
    ),
    "Cu fresh": (  # Powell et al. 2007 (IUPAC Cu report) hydrolysis; fresh Cu(OH)2 9.36 (Hidmi & Edwards 1999)
        "Cu^2+",
        2,
        "Cu(OH)2 (fresh precipitate)",
        9.36,
        {
            (1, 1): -7.95,
            (1, 2): -16.2,
            (1, 3): -26.6,
            (1, 4): -39.74,
            (2, 1): -6.4,
            (2, 2): -10.43,
            (3, 4): -21.1,
        },
    ),
    "Cd": (  # Powell et al. 2011 (IUPAC Cd report)
        "Cd^2+",
        2,
        "Cd(OH)2",
        13.72,
        {(1, 1): -9.8, (1, 2): -20.19, (1, 3): -33.5, (1, 4): -47.28, (2, 1): -8.73},
    ),
    "Pb fresh": (  # Powell et al. 2009 (IUPAC Pb report); massicot
        "Pb^2+",
        2,
        "PbO (massicot, yellow)",
        12.9,
        {
            (1, 1): -7.46,
            (1, 2): -16.94,
            (1, 3): -28.03,
            (1, 4): -40.8,
            (2, 1): -7.28,
            (3, 4): -23.01,
            (4, 4): -20.57,
            (6, 8): -42.89,
        },
    ),
    "Ni fresh": (  # Brown & Ekberg 2016; Ni(OH)3- from Gamsjaeger et al. 2005 (OECD-NEA)
        "Ni^2+",
        2,
        "Ni(OH)2 (microcrystalline)",
        11.75,
        {(1, 1): -9.9, (1, 2): -21.15, (1, 3): -29.2, (2, 1): -10.6, (4, 4): -27.9},
    ),
    "Al fresh": (  # Brown & Ekberg 2016 hydrolysis; am-Al(OH)3 10.35 (SC-Database 1997OWa)
        "Al^3+",
        3,
        "Al(OH)3 (amorphous)",
        10.35,
        {
            (1, 1): -4.98,
            (1, 2): -10.63,
            (1, 3): -15.66,
            (1, 4): -22.91,
            (2, 2): -7.62,
            (3, 4): -14.06,
            (13, 32): -100.03,
        },
    ),
    "Fe(III) fresh": (  # Brown & Ekberg 2016; 2-line ferrihydrite
        "Fe^3+",
        3,
        "Fe(OH)3 (ferrihydrite)",
        3.5,
        {(1, 1): -2.2, (1, 2): -5.71, (1, 3): -12.42, (1, 4): -21.6, (2, 2): -2.91, (3, 4): -6.3},
    ),
    "Cr(III) fresh": (  # Brown & Ekberg 2016
        "Cr^3+",
        3,
        "Cr(OH)3 (amorphous)",
        9.41,
        {(1, 1): -3.6, (1, 2): -9.65, (1, 3): -16.25, (1, 4): -27.56, (2, 2): -5.29, (3, 4): -9.1},
    ),
    "Mn": (
        "Mn^2+",
        2,
        "Mn(OH)2 (pyrochroite)",
        15.19,
        {(1, 1): -10.58, (1, 2): -22.18, (1, 3): -34.34, (1, 4): -48.28},
    ),
    "Co": (
        "Co^2+",
        2,
        "Co(OH)2",
        13.24,
        {(1, 1): -9.61, (1, 2): -19.77, (1, 3): -32.01},
    ),  # Brown & Ekberg 2016
    "Ag": ("Ag+", 1, "1/2 Ag2O", 6.27, {(1, 1): -11.75, (1, 2): -24.34}),  # Brown & Ekberg 2016
}
TOTAL = 0.01  # mol/L


def closed_form(z, log_ks, betas, ph):
    """Dissolved total, summed in log10 space (Al13 terms overflow otherwise)."""
    log_m = log_ks - z * ph
    terms = [log_m] + [np.log10(p) + lb + p * log_m + q * ph for (p, q), lb in betas.items()]
    terms = np.array(terms)
    top = terms.max(axis=0)
    return 10.0 ** (top + np.log10((10.0 ** (terms - top)).sum(axis=0)))


@pytest.mark.parametrize("case", sorted(CASES))
def test_single_metal_matches_closed_form(case):
    comp, z, solid, log_ks, betas, *_ = CASES[case]
    form = "aged" if "aged" in case else "fresh"
    tab = tableau.build((comp,), 25.0, form)
    assert solid in tab.solids
    ph = np.round(np.arange(4.0, 13.0001, 0.05), 4)
    t = np.zeros(len(tab.components))
    t[tab.component(comp)] = TOTAL
    eq = solver.solve(tab, t, ph, activity="ideal")
    got = eq.dissolved()[:, tab.component(comp)]
    expected = closed_form(z, log_ks, betas, ph)
    saturated = expected < TOTAL * (1 - 1e-9)
    assert saturated.sum() > 10, "the test range must include points with the solid present"
    np.testing.assert_allclose(got[saturated], expected[saturated], rtol=1e-6)
    np.testing.assert_allclose(got[~saturated], TOTAL, rtol=1e-10)
    k = tab.solids.index(solid)
    assert (eq.solid_amount[saturated, k] > 0).all()
