"""Properties of liquid water at atmospheric pressure, as functions of temperature.

Density, the ionisation constant Kw, the relative permittivity, the Debye-Hückel A constant, the Davies
activity coefficient and the van 't Hoff temperature correction. Pure numpy, vectorised over temperature:
a scalar in gives a numpy scalar out, an array in gives an array of the same shape out.

Temperatures at the boundary are in °C (``temperature_c``); the formulas work in kelvin. Each correlation
accepts 0-100 °C (liquid water at 1 atm, :data:`CORRELATION_RANGE_C`) and raises
:class:`~workbench.errors.InputError` (a ``ValueError``) outside it; the workbench itself supports the
narrower :data:`VALID_TEMPERATURE_C` (checked by its callers), over which every function here is tested
against the IAPWS formulations in ``tests/test_water_properties.py``.

Sources of the constants used throughout this module:

- 0 °C = 273.15 K: definition of the Celsius scale (The International System of Units, SI Brochure,
  9th ed., BIPM 2019).
- Reference temperature 298.15 K: the conventional standard temperature of thermodynamic tables
  (e.g. Stumm, W. & Morgan, J. J., 1996, *Aquatic Chemistry*, 3rd ed., Wiley; chapter from memory: 2).
- Molar gas constant R = 8.314462618 J/(mol K), exact since the 2019 SI redefinition:
  Tiesinga, E., Mohr, P. J., Newell, D. B. & Taylor, B. N. (2021), "CODATA recommended values of the
  fundamental physical constants: 2018", Rev. Mod. Phys. 93, 025010.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from workbench.errors import InputError

__all__ = [
    "CORRELATION_RANGE_C",
    "DAVIES_MAX_IONIC_STRENGTH_MOL_L",
    "GAS_CONSTANT_J_MOL_K",
    "REFERENCE_TEMPERATURE_K",
    "VALID_TEMPERATURE_C",
    "davies_a",
    "davies_a_from_properties",
    "davies_log_gamma",
    "dielectric_constant",
    "pkw",
    "pkw_from_density",
    "van_t_hoff",
    "water_density_kg_m3",
]

#: Temperature range the workbench supports, [°C]. Callers (the water description) refuse anything outside.
VALID_TEMPERATURE_C = (5.0, 50.0)

#: Range over which the correlations below accept a temperature: liquid water at 1 atm, [°C].
CORRELATION_RANGE_C = (0.0, 100.0)

#: Upper ionic strength for the Davies equation, [mol/L]. The usual statement of its range (e.g. Stumm &
#: Morgan 1996, Aquatic Chemistry, 3rd ed., Wiley), quoted from memory. Callers warn above it.
DAVIES_MAX_IONIC_STRENGTH_MOL_L = 0.5

#: Molar gas constant, [J/(mol K)]. CODATA 2018 (Tiesinga et al. 2021), exact.
GAS_CONSTANT_J_MOL_K = 8.314462618

#: Reference temperature of tabulated equilibrium constants, [K].
REFERENCE_TEMPERATURE_K = 298.15

_CELSIUS_OFFSET_K = 273.15  # SI definition of the Celsius scale

# Kell (1975), 1-atm density of air-free water. Coefficients from memory (see water_density_kg_m3).
_KELL_NUMERATOR = (999.83952, 16.945176, -7.9870401e-3, -46.170461e-6, 105.56302e-9, -280.54253e-12)
_KELL_DENOMINATOR = 16.879850e-3

# IAPWS R11-07 (Bandura & Lvov 2006). Coefficients from memory, as written out in the project's reference
# notes; they reproduce the release's check values (see pkw_from_density).
_KW_N = 6
_KW_ALPHA = (-0.864671, 8659.19, -22786.2)
_KW_BETA = (0.642044, -56.8534, -0.375754)
_KW_GAMMA = (0.61415, 48251.33, -67707.93, 10102100.0)
_WATER_MOLAR_MASS_G_MOL = 18.015268  # IAPWS R11-07, the value the release uses (IAPWS-95 molar mass)

# Owen, Miller, Milner & Cogan (1961), 1-atm permittivity: log10(eps) = a - b t. Coefficients from memory.
_OWEN_LOG10_EPS_0C = 1.94404
_OWEN_SLOPE_PER_C = 1.991e-3

# Debye-Hückel limiting-law constant in log10 units: A = 1.82483e6 sqrt(rho) / (eps T)^1.5 with rho in g/cm3.
# Textbook value (memory) of e^3 sqrt(2000 N_A) / (8 pi ln10 (eps0 k)^1.5) in SI units; the CODATA 2018
# constants give 1.824812e6 (1e-5 lower, immaterial), which the test suite checks.
_DEBYE_HUCKEL_PREFACTOR = 1.82483e6

# Davies (1962): the linear term's coefficient.
DAVIES_LINEAR = 0.3


def _temperature_k(temperature_c: ArrayLike, name: str = "temperature_c") -> np.ndarray:
    """Convert a temperature in °C to kelvin after checking it lies in :data:`CORRELATION_RANGE_C`."""
    t = np.asarray(temperature_c, dtype=float)
    low, high = CORRELATION_RANGE_C
    bad = ~np.isfinite(t) | (t < low) | (t > high)
    if np.any(bad):
        value = float(t[bad].flat[0]) if t.ndim else float(t)
        raise InputError(name, value, f"allowed: {low:g} to {high:g} °C (water-property correlations, 1 atm)")
    return t + _CELSIUS_OFFSET_K


def water_density_kg_m3(temperature_c: ArrayLike) -> np.ndarray:
    """Density of air-free liquid water at 1 atm (101.325 kPa).

    Parameters
    ----------
    temperature_c : array_like
        Temperature, 0-100. [°C]

    Returns
    -------
    numpy.ndarray or numpy.float64
        Density. [kg/m3]

    Notes
    -----
    Kell's rational function for water at one standard atmosphere [1]_:

    .. math::

        \\rho = \\frac{a_0 + a_1 t + a_2 t^2 + a_3 t^3 + a_4 t^4 + a_5 t^5}{1 + b\\,t}

    with :math:`t` in °C. The six numerator coefficients and :math:`b` are quoted **from memory**, not read
    from the paper. The test suite checks them against IAPWS-95 (through the ``iapws`` package) at 0.101325
    MPa: the largest deviation between 5 and 50 °C is 0.003 kg/m3. [1]_ is on the 1968 temperature scale;
    the difference from ITS-90 (< 0.01 K here) moves the density by less than 0.003 kg/m3.

    References
    ----------
    .. [1] Kell, G. S. (1975). "Density, thermal expansivity, and compressibility of liquid water from
       0 °C to 150 °C: correlations and tables for atmospheric pressure and saturation reviewed and
       expressed on 1968 temperature scale". J. Chem. Eng. Data 20(1), 97-105. doi:10.1021/je60064a005
    """
    t = _temperature_k(temperature_c) - _CELSIUS_OFFSET_K
    numerator = np.polynomial.polynomial.polyval(t, _KELL_NUMERATOR)
    return numerator / (1.0 + _KELL_DENOMINATOR * t)  # 1-atm density correlation in [1]


def pkw_from_density(temperature_k: ArrayLike, density_kg_m3: ArrayLike) -> np.ndarray:
    """Ionisation constant of water, -log10 Kw, from temperature and density (IAPWS R11-07).

    Parameters
    ----------
    temperature_k : array_like
        Temperature. [K]
    density_kg_m3 : array_like
        Density of water. [kg/m3]

    Returns
    -------
    numpy.ndarray or numpy.float64
        pKw on the molal scale (Kw in mol²/kg²). [-]

    Notes
    -----
    The release's formulation [1]_ (derivation in [2]_), with :math:`\\rho` in g/cm3, :math:`T` in K,
    :math:`n = 6` and :math:`M_w = 18.015268` g/mol:

    .. math::

        pK_w = -2n \\left[\\log_{10}(1 + Q) - \\frac{Q}{Q + 1}\\,\\rho\\,(\\beta_0 + \\beta_1 T^{-1}
        + \\beta_2 \\rho)\\right] + pK_w^G + 2 \\log_{10}\\frac{M_w}{1000}

    .. math::

        Q = \\rho \\exp(\\alpha_0 + \\alpha_1 T^{-1} + \\alpha_2 T^{-2} \\rho^{2/3}), \\qquad
        pK_w^G = \\gamma_0 + \\gamma_1 T^{-1} + \\gamma_2 T^{-2} + \\gamma_3 T^{-3}

    The coefficients are **from memory** (written out in the project's reference notes); they reproduce
    the release's check values: 13.906565 at 300 K and 1000 kg/m3, 21.048874 at 600 K and 70 kg/m3,
    11.203153 at 600 K and 700 kg/m3 (all three are asserted in the test suite). The equation numbers in
    the code comments (1: pKw, 2: Q, 3: pKw^G) follow the release as remembered, not as re-read.

    References
    ----------
    .. [1] IAPWS R11-07 (2007, revised 2019). "Revised Release on the Ionization Constant of H2O".
       International Association for the Properties of Water and Steam.
    .. [2] Bandura, A. V. & Lvov, S. N. (2006). "The ionization constant of water over wide ranges of
       temperature and density". J. Phys. Chem. Ref. Data 35(1), 15-30. doi:10.1063/1.1928231
    """
    t = np.asarray(temperature_k, dtype=float)
    rho = np.asarray(density_kg_m3, dtype=float) / 1000.0  # g/cm3, the unit of [1]
    a0, a1, a2 = _KW_ALPHA
    b0, b1, b2 = _KW_BETA
    q = rho * np.exp(a0 + a1 / t + a2 * rho ** (2.0 / 3.0) / t**2)  # Eq. 2 in [1]
    pkw_gas = np.polynomial.polynomial.polyval(1.0 / t, _KW_GAMMA)  # Eq. 3 in [1]
    bracket = np.log10(1.0 + q) - q / (q + 1.0) * rho * (b0 + b1 / t + b2 * rho)
    return -2.0 * _KW_N * bracket + pkw_gas + 2.0 * np.log10(_WATER_MOLAR_MASS_G_MOL / 1000.0)  # Eq. 1 in [1]


def pkw(temperature_c: ArrayLike) -> np.ndarray:
    """Ionisation constant of water at 1 atm, -log10 Kw, as a function of temperature.

    Parameters
    ----------
    temperature_c : array_like
        Temperature, 0-100. [°C]

    Returns
    -------
    numpy.ndarray or numpy.float64
        pKw (Kw in mol²/kg²; 13.9945 at 25 °C). [-]

    Notes
    -----
    :func:`pkw_from_density` (IAPWS R11-07 [1]_) evaluated at the density of :func:`water_density_kg_m3`
    (Kell 1975). The release prescribes the IAPWS-95 density; Kell's 1-atm correlation agrees with it to
    0.003 kg/m3 between 5 and 50 °C, which changes pKw by less than 1e-5.

    References
    ----------
    .. [1] IAPWS R11-07 (2007, revised 2019). "Revised Release on the Ionization Constant of H2O";
       Bandura, A. V. & Lvov, S. N. (2006), J. Phys. Chem. Ref. Data 35(1), 15-30.
    """
    t_k = _temperature_k(temperature_c)
    return pkw_from_density(t_k, water_density_kg_m3(temperature_c))


def dielectric_constant(temperature_c: ArrayLike) -> np.ndarray:
    """Relative permittivity (static dielectric constant) of liquid water at 1 atm.

    Parameters
    ----------
    temperature_c : array_like
        Temperature, 0-100. [°C]

    Returns
    -------
    numpy.ndarray or numpy.float64
        Relative permittivity (78.39 at 25 °C). [-]

    Notes
    -----
    The 1-atm correlation of Owen, Miller, Milner & Cogan [1]_:

    .. math::

        \\log_{10} \\varepsilon = 1.94404 - 1.991 \\times 10^{-3}\\, t

    with :math:`t` in °C. Coefficients **from memory**. The test suite checks it against the IAPWS release
    on the static dielectric constant (R8-97, through the ``iapws`` package, with IAPWS-95 density at
    0.101325 MPa): within 0.03 % between 5 and 50 °C (0.1 % at 99 °C). It was chosen over Malmberg &
    Maryott (1956, J. Res. Natl. Bur. Stand. 56, 1-8), whose polynomial reads 0.13 % below R8-97 at 25 °C.

    References
    ----------
    .. [1] Owen, B. B., Miller, R. C., Milner, C. E. & Cogan, H. L. (1961). "The dielectric constant of
       water as a function of temperature and pressure". J. Phys. Chem. 65(11), 2065-2070.
    """
    t = _temperature_k(temperature_c) - _CELSIUS_OFFSET_K
    return 10.0 ** (_OWEN_LOG10_EPS_0C - _OWEN_SLOPE_PER_C * t)  # 1-atm correlation in [1]


def davies_a_from_properties(
    temperature_k: ArrayLike, density_kg_m3: ArrayLike, relative_permittivity: ArrayLike
) -> np.ndarray:
    """Debye-Hückel A constant (log10 units) from temperature, density and permittivity of water.

    Parameters
    ----------
    temperature_k : array_like
        Temperature. [K]
    density_kg_m3 : array_like
        Density of water. [kg/m3]
    relative_permittivity : array_like
        Relative permittivity of water. [-]

    Returns
    -------
    numpy.ndarray or numpy.float64
        A, such that log10 gamma = -A z² sqrt(I) in the limiting law. [(kg/mol)^0.5]

    Notes
    -----
    The limiting-law constant of Debye & Hückel [1]_ written with the usual numerical prefactor
    (e.g. Robinson & Stokes [2]_, quoted from memory; recomputed from CODATA 2018 in the test suite,
    which gives 1.824812e6):

    .. math::

        A = \\frac{1.82483 \\times 10^6 \\sqrt{\\rho}}{(\\varepsilon T)^{3/2}}

    with :math:`\\rho` in g/cm3 and :math:`T` in K. The density factor makes this the molal-scale constant.
    Used with an ionic strength in mol/L (the workbench's internal unit) it is off by the factor
    sqrt(rho / 1 kg/L): 0.15 % at 25 °C, 0.6 % at 50 °C, well inside the Davies equation's own accuracy.

    References
    ----------
    .. [1] Debye, P. & Hückel, E. (1923). "Zur Theorie der Elektrolyte. I. Gefrierpunktserniedrigung und
       verwandte Erscheinungen". Physikalische Zeitschrift 24, 185-206.
    .. [2] Robinson, R. A. & Stokes, R. H. (1959). *Electrolyte Solutions*, 2nd ed. Butterworths, London.
    """
    t = np.asarray(temperature_k, dtype=float)
    rho_g_cm3 = np.asarray(density_kg_m3, dtype=float) / 1000.0
    eps = np.asarray(relative_permittivity, dtype=float)
    return _DEBYE_HUCKEL_PREFACTOR * np.sqrt(rho_g_cm3) / (eps * t) ** 1.5  # limiting-law A in [1], [2]


def davies_a(temperature_c: ArrayLike) -> np.ndarray:
    """Debye-Hückel A constant (log10 units) of water at 1 atm, for the Davies equation.

    Parameters
    ----------
    temperature_c : array_like
        Temperature, 0-100. [°C]

    Returns
    -------
    numpy.ndarray or numpy.float64
        A (0.5099 at 25 °C). [(kg/mol)^0.5, used with I in mol/L]

    Notes
    -----
    :func:`davies_a_from_properties` with the density of :func:`water_density_kg_m3` (Kell 1975) and the
    permittivity of :func:`dielectric_constant` (Owen et al. 1961); see those functions for the sources.
    """
    t_k = _temperature_k(temperature_c)
    return davies_a_from_properties(
        t_k, water_density_kg_m3(temperature_c), dielectric_constant(temperature_c)
    )


def davies_log_gamma(charge: ArrayLike, ionic_strength_mol_l: ArrayLike, a: ArrayLike) -> np.ndarray:
    """Log10 activity coefficient of an ion from the Davies equation.

    Parameters
    ----------
    charge : array_like
        Ion charge number z (e.g. 2 for Zn²⁺, -1 for OH⁻). [-]
    ionic_strength_mol_l : array_like
        Ionic strength, >= 0. [mol/L]
    a : array_like
        Debye-Hückel A constant, e.g. from :func:`davies_a`. [(L/mol)^0.5]

    Returns
    -------
    numpy.ndarray or numpy.float64
        log10 of the activity coefficient, broadcast over the three inputs (0 for a neutral species). [-]

    Raises
    ------
    workbench.errors.InputError
        If an ionic strength is negative or not finite.

    Notes
    -----
    Davies' equation [1]_:

    .. math::

        \\log_{10} \\gamma = -A z^2 \\left(\\frac{\\sqrt{I}}{1 + \\sqrt{I}} - 0.3\\,I\\right)

    It is an empirical extension of the Debye-Hückel law, commonly taken as valid to an ionic strength of
    about 0.5 mol/L (:data:`DAVIES_MAX_IONIC_STRENGTH_MOL_L`); this function does not warn, its callers do.

    References
    ----------
    .. [1] Davies, C. W. (1962). *Ion Association*. Butterworths, London.
    """
    ionic_strength = np.asarray(ionic_strength_mol_l, dtype=float)
    bad = ~np.isfinite(ionic_strength) | (ionic_strength < 0.0)
    if np.any(bad):
        value = float(ionic_strength[bad].flat[0]) if ionic_strength.ndim else float(ionic_strength)
        raise InputError("ionic_strength_mol_l", value, "allowed: a finite value >= 0 mol/L")
    z = np.asarray(charge, dtype=float)
    root = np.sqrt(ionic_strength)
    return -np.asarray(a, dtype=float) * z**2 * (root / (1.0 + root) - DAVIES_LINEAR * ionic_strength)  # [1]


def van_t_hoff(log_k_25c: ArrayLike, delta_h_kj_mol: ArrayLike, temperature_c: ArrayLike) -> np.ndarray:
    """Equilibrium constant at another temperature from its 25 °C value and reaction enthalpy.

    Parameters
    ----------
    log_k_25c : array_like
        log10 K at 298.15 K. [-]
    delta_h_kj_mol : array_like
        Standard reaction enthalpy, taken as constant over the range. Must be finite: a missing value is the
        caller's decision, not this function's. [kJ/mol]
    temperature_c : array_like
        Temperature, 0-100. [°C]

    Returns
    -------
    numpy.ndarray or numpy.float64
        log10 K at ``temperature_c``, broadcast over the three inputs. [-]

    Raises
    ------
    workbench.errors.InputError
        If ``log_k_25c`` or ``delta_h_kj_mol`` holds a non-finite value, or the temperature is out of range.

    Notes
    -----
    The integrated van 't Hoff equation with a constant reaction enthalpy ([1]_, [2]_):

    .. math::

        \\log_{10} K(T) = \\log_{10} K(T_0) - \\frac{\\Delta H^\\circ}{R \\ln 10}
        \\left(\\frac{1}{T} - \\frac{1}{T_0}\\right), \\qquad T_0 = 298.15\\ \\mathrm{K}

    with R = 8.314462618 J/(mol K) (CODATA 2018, exact).

    References
    ----------
    .. [1] van 't Hoff, J. H. (1884). *Études de dynamique chimique*. Frederik Muller, Amsterdam.
    .. [2] Stumm, W. & Morgan, J. J. (1996). *Aquatic Chemistry*, 3rd ed. Wiley, New York, chapter 2.
    """
    log_k = np.asarray(log_k_25c, dtype=float)
    delta_h = np.asarray(delta_h_kj_mol, dtype=float)
    for name, values in (("log_k_25c", log_k), ("delta_h_kj_mol", delta_h)):
        if not np.all(np.isfinite(values)):
            value = float(values[~np.isfinite(values)].flat[0]) if values.ndim else float(values)
            raise InputError(
                name, value, "allowed: finite numbers only (a missing value is the caller's choice)"
            )
    t_k = _temperature_k(temperature_c)
    slope = delta_h * 1000.0 / (GAS_CONSTANT_J_MOL_K * np.log(10.0))  # J/mol over R ln10, in K
    return log_k - slope * (1.0 / t_k - 1.0 / REFERENCE_TEMPERATURE_K)  # integrated van 't Hoff, [1] [2]
