"""Physical constants in deepwell's internal units.

Internal units: sky angles in mas, time in Julian years (365.25 d, TT),
distances in au and pc, masses in solar masses, velocities in km/s.
All values are derived once from :mod:`astropy.constants` (IAU 2012/2015
nominal values) so that there is a single source of truth.
"""

import math

from astropy import constants as _const
from astropy import units as _u

#: Nominal solar mass parameter GM_sun in m^3 s^-2 (IAU 2015 Resolution B3).
GM_SUN_SI = float(_const.GM_sun.si.value)
#: Speed of light in m/s.
C_SI = float(_const.c.si.value)
#: Astronomical unit in m (IAU 2012 Resolution B2).
AU_SI = float(_const.au.si.value)
#: Julian year in s.
YEAR_SI = float((1 * _u.yr).to_value(_u.s))
#: Parsec in au (IAU 2015 Resolution B2: 648000/pi au).
PC_AU = float((1 * _u.pc).to_value(_u.au))

#: Kepler constant k in P[yr]^2 = k a[au]^3 / M[Msun]: 4 pi^2 au^3 / (GM_sun yr^2).
KEPLER_K = 4.0 * math.pi**2 * AU_SI**3 / (GM_SUN_SI * YEAR_SI**2)
#: 1 au/yr in km/s (about 4.740470463).
KMS_PER_AU_PER_YR = AU_SI / YEAR_SI / 1000.0
#: Speed of light in au per Julian year.
C_AU_PER_YR = C_SI * YEAR_SI / AU_SI
#: Speed of light in km/s.
C_KMS = C_SI / 1000.0
#: GM_sun / c^2 in au (gravitational radius of one solar mass).
GRAV_RADIUS_AU_PER_MSUN = GM_SUN_SI / C_SI**2 / AU_SI
#: Schwarzschild radius of one solar mass in m (2 GM_sun / c^2, about 2953.25 m).
SCHWARZSCHILD_M_PER_MSUN = 2.0 * GM_SUN_SI / C_SI**2
#: GM_sun in au^3 / yr^2 (= 4 pi^2 / KEPLER_K).
GM_SUN_AU3_PER_YR2 = GM_SUN_SI * YEAR_SI**2 / AU_SI**3
#: mas per radian.
MAS_PER_RAD = 180.0 / math.pi * 3600e3
#: Reference epoch of the frame (position and drift of the mass), Julian year TT.
DEFAULT_REFERENCE_EPOCH = 2000.0
