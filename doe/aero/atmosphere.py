"""Air properties: the ISO 2533 standard atmosphere at sea level and Sutherland's viscosity law.

References
----------
.. [1] ISO 2533:1975. Standard Atmosphere. International Organization for Standardization.
"""
from __future__ import annotations

import numpy as np

__all__ = ["ISA_DENSITY", "ISA_PRESSURE", "ISA_TEMPERATURE", "ISA_VISCOSITY", "viscosity", "reynolds"]

#: Sea-level density of the ISO 2533 standard atmosphere, kg/m^3.
ISA_DENSITY = 1.2250
#: Sea-level pressure, Pa.
ISA_PRESSURE = 101325.0
#: Sea-level temperature, K.
ISA_TEMPERATURE = 288.15
#: Sea-level dynamic viscosity, Pa s.
ISA_VISCOSITY = 1.7894e-5
_SUTHERLAND_BETA = 1.458e-6      # kg / (m s K^0.5), ISO 2533
_SUTHERLAND_S = 110.4            # K


def viscosity(temperature=ISA_TEMPERATURE):
    """Dynamic viscosity of air by Sutherland's law, ``beta T^1.5 / (T + S)``.

    Parameters
    ----------
    temperature : array_like
        Air temperature, K.

    Returns
    -------
    ndarray or float
        Dynamic viscosity, Pa s (1.7894e-5 at 288.15 K).

    References
    ----------
    .. [1] ISO 2533:1975, Standard Atmosphere (beta = 1.458e-6, S = 110.4 K).
    """
    t = np.asarray(temperature, dtype=float)
    return _SUTHERLAND_BETA * t**1.5 / (t + _SUTHERLAND_S)


def reynolds(speed, length, density=ISA_DENSITY, temperature=ISA_TEMPERATURE):
    """Reynolds number ``rho V L / mu`` (speed in m/s, length in m, density in kg/m^3, temperature in K)."""
    return np.asarray(density) * np.asarray(speed) * np.asarray(length) / viscosity(temperature)
