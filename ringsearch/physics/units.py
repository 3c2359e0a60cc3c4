"""Unit conversions between geometric units and SI, from astropy's constants.

Masses are in solar masses (detector frame unless a name says ``source``),
times in seconds, distances in megaparsecs.  No constant is typed by hand.
"""

from __future__ import annotations

from astropy import constants as _c
from astropy import units as _u

#: G M_sun / c^3 in seconds (IAU 2015 nominal solar mass parameter).
MSUN_S: float = float((_c.GM_sun / _c.c**3).to_value(_u.s))
#: G M_sun / c^2 in metres.
MSUN_M: float = float((_c.GM_sun / _c.c**2).to_value(_u.m))
#: Solar mass in kg (IAU nominal GM_sun / G).
MSUN_KG: float = float((_c.GM_sun / _c.G).to_value(_u.kg))
#: One megaparsec in metres.
MPC_M: float = float((1 * _u.Mpc).to_value(_u.m))
#: Speed of light in m/s.
C_SI: float = float(_c.c.to_value(_u.m / _u.s))
#: Newton's constant in SI.
G_SI: float = float(_c.G.to_value(_u.m**3 / _u.kg / _u.s**2))
#: Seconds in a Julian year (for false-alarm rates per year).
YEAR_S: float = float((1 * _u.yr).to_value(_u.s))
