"""Physical constants, each with its source."""

#: Standard acceleration of gravity, m s-2. 3rd CGPM (1901), adopted in ISO 80000-3.
STANDARD_GRAVITY = 9.80665

#: Mean Earth radius, m: IUGG mean radius R1 of GRS 80 (Moritz 2000, J. Geodesy 74, 128-133).
EARTH_RADIUS = 6371008.7714

#: Density of liquid water, kg m-3, used to turn kg of water into m3 and kg m-2 into mm.
#: Common practice (999.97 kg m-3 at 4 degC); no single source.
WATER_DENSITY = 1000.0

#: Seconds per day, s.
SECONDS_PER_DAY = 86400.0

#: Molar mass of dry air, kg mol-1: 28.96546e-3 (Picard et al. 2008, Metrologia 45, CIPM-2007
#: equation for moist air; from memory, the value MetPy also uses).
MOLAR_MASS_DRY_AIR = 28.96546e-3

#: Molar mass of water, kg mol-1: 18.015268e-3 (IAPWS-95, Wagner and Pruss 2002; from memory).
MOLAR_MASS_WATER = 18.015268e-3

#: epsilon = Rd / Rv = Mw / Md ≈ 0.62196, the ratio in q = eps e / (p - (1 - eps) e).
EPSILON = MOLAR_MASS_WATER / MOLAR_MASS_DRY_AIR

#: 0 degC in kelvin (SI brochure: T/K = t/degC + 273.15).
ZERO_CELSIUS = 273.15
