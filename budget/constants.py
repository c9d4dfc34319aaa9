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
