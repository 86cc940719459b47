"""The one set of physical constants used everywhere in gridstab.

Every module takes its numbers from here; no physical constant is written twice.

Sources
-------
* ``DRY_AIR_GAS_CONSTANT`` and ``DRY_AIR_HEAT_CAPACITY`` are the pair used by
  Bolton (1980, Mon. Wea. Rev. 108, 1046-1053).
* ``WATER_VAPOUR_GAS_CONSTANT``, ``VAPOUR_HEAT_CAPACITY``, ``LIQUID_HEAT_CAPACITY``
  and ``LATENT_HEAT_VAPORISATION_0C`` are the values tabulated by Emanuel (1994,
  *Atmospheric Convection*, Oxford University Press), quoted from memory.
* ``STANDARD_GRAVITY`` is the conventional value of the CGPM (1901), also used by the
  ICAO standard atmosphere (ISO 2533).
* ``REFERENCE_PRESSURE`` is the 1000 hPa reference of potential temperature
  (common practice).
"""

DRY_AIR_GAS_CONSTANT = 287.04
"""Specific gas constant of dry air, J kg-1 K-1."""

WATER_VAPOUR_GAS_CONSTANT = 461.5
"""Specific gas constant of water vapour, J kg-1 K-1."""

EPSILON = DRY_AIR_GAS_CONSTANT / WATER_VAPOUR_GAS_CONSTANT
"""Ratio of the gas constants of dry air and water vapour (about 0.622), dimensionless."""

DRY_AIR_HEAT_CAPACITY = 1005.7
"""Specific heat capacity of dry air at constant pressure, J kg-1 K-1."""

VAPOUR_HEAT_CAPACITY = 1870.0
"""Specific heat capacity of water vapour at constant pressure, J kg-1 K-1."""

LIQUID_HEAT_CAPACITY = 4190.0
"""Specific heat capacity of liquid water, J kg-1 K-1."""

LATENT_HEAT_VAPORISATION_0C = 2.501e6
"""Latent heat of vaporisation at ``FREEZING_POINT``, J kg-1.

It varies linearly with temperature (Kirchhoff's law) with slope
``VAPOUR_HEAT_CAPACITY - LIQUID_HEAT_CAPACITY``.
"""

FREEZING_POINT = 273.15
"""Temperature at which ``LATENT_HEAT_VAPORISATION_0C`` applies, K."""

TRIPLE_POINT = 273.16
"""Triple point of water, K (ITS-90)."""

STANDARD_GRAVITY = 9.80665
"""Standard acceleration of gravity, m s-2."""

REFERENCE_PRESSURE = 100000.0
"""Reference pressure of potential temperatures, Pa (1000 hPa)."""

KAPPA = DRY_AIR_GAS_CONSTANT / DRY_AIR_HEAT_CAPACITY
"""Poisson exponent of dry air, Rd/cpd (about 0.2854), dimensionless."""

DRY_ADIABATIC_LAPSE_RATE = STANDARD_GRAVITY / DRY_AIR_HEAT_CAPACITY
"""g/cpd, K m-1 (about 9.75 K/km)."""
