"""Every conversion between geometric units and SI, in one place.

Internal quantities are geometric: G = c = 1 and every coordinate length is in
units of L = ``length_m`` metres. The conversions follow from restoring G and c
(e.g. Wald 1984, Appendix F — from memory; common practice):

* energy density   ρ [J/m³] = ρ · c⁴ / (G L²)
* energy           E [J]    = E · L c⁴ / G,   mass  E [kg] = E · L c² / G
* curvature (tidal eigenvalue) [s⁻²] = E_k · c² / L²
* acceleration across ℓ metres [m/s²] = |E_k| · c² ℓ / L²
* time             τ [s]    = τ · L / c
* length           ℓ [m]    = ℓ · L

Constants are CODATA values from :mod:`scipy.constants`; standard gravity is
the conventional value g_n = 9.80665 m/s² (3rd CGPM, 1901).
"""

from __future__ import annotations

import numpy as np

__all__ = ["constants", "use_constants", "energy_density_J_m3", "energy_J",
           "energy_kg", "curvature_s2", "tidal_accel_m_s2", "accel_g", "time_s",
           "length_m", "proper_accel_m_s2"]

# C_M_S: speed of light in vacuum, m/s (exact, SI 2019; scipy.constants.c).
# G_SI: Newtonian constant of gravitation, m³ kg⁻¹ s⁻² (CODATA; scipy.constants.G).
# G_STANDARD_M_S2: standard acceleration of gravity, m/s² (3rd CGPM 1901;
# scipy.constants.g). Read from scipy.constants on first use (module
# __getattr__): importing it takes a noticeable part of a warm start.
_SCIPY_NAMES = {"C_M_S": "c", "G_SI": "G", "G_STANDARD_M_S2": "g"}
# The values once read (or restored from a signed start-up record, which keeps
# them beside the SciPy version they came from: see auditor/warm.py).
_VALUES: dict[str, float] = {}


def _k(name: str) -> float:
    value = _VALUES.get(name)
    if value is None:
        from scipy import constants
        for key, attr in _SCIPY_NAMES.items():
            _VALUES[key] = float(getattr(constants, attr))
        value = _VALUES[name]
    return value


def constants() -> dict[str, float]:
    """The constants used here, by internal name, as read from scipy.constants."""
    return {name: _k(name) for name in _SCIPY_NAMES}


def use_constants(values) -> bool:
    """Take the constants from ``values`` (as :func:`constants` returned them in
    a run with the same SciPy) instead of importing scipy.constants; refused
    (False) unless it holds exactly those names with finite positive values."""
    if not isinstance(values, dict) or set(values) != set(_SCIPY_NAMES):
        return False
    if not all(isinstance(v, float) and np.isfinite(v) and v > 0 for v in values.values()):
        return False
    _VALUES.update(values)
    return True


def __getattr__(name):
    if name in _SCIPY_NAMES:
        return _k(name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def energy_density_J_m3(rho, length_m: float):
    """Geometric energy density (1/length²) to J/m³: ρ c⁴/(G L²)."""
    return np.asarray(rho) * _k("C_M_S")**4 / (_k("G_SI") * length_m**2)


def energy_J(energy, length_m: float):
    """Geometric energy (length) to joules: E L c⁴/G."""
    return np.asarray(energy) * length_m * _k("C_M_S")**4 / _k("G_SI")


def energy_kg(energy, length_m: float):
    """Geometric energy (length) to the equivalent mass in kg: E L c²/G."""
    return np.asarray(energy) * length_m * _k("C_M_S")**2 / _k("G_SI")


def curvature_s2(value, length_m: float):
    """Geometric curvature component (1/length²) to s⁻²: E c²/L²."""
    return np.asarray(value) * _k("C_M_S")**2 / length_m**2


def tidal_accel_m_s2(eigenvalue, length_m: float, body_length_m: float):
    """Relative acceleration across a body of ``body_length_m`` metres, m/s²."""
    return np.abs(curvature_s2(eigenvalue, length_m)) * body_length_m


def proper_accel_m_s2(accel, length_m: float):
    """Geometric acceleration (1/length) to m/s²: a c²/L."""
    return np.asarray(accel) * _k("C_M_S")**2 / length_m


def accel_g(accel_m_s2):
    """Acceleration in standard g."""
    return np.asarray(accel_m_s2) / _k("G_STANDARD_M_S2")


def time_s(tau, length_m: float):
    """Geometric time (length) to seconds: τ L / c."""
    return np.asarray(tau) * length_m / _k("C_M_S")


def length_m(ell, length_m_per_unit: float):
    """Coordinate length to metres."""
    return np.asarray(ell) * length_m_per_unit
