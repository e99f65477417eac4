"""Physical and model constants, each named once with its units and source."""

#: Radius of the sphere with the same surface area as the WGS84 ellipsoid (authalic radius), m.
#: Source: NGA/NIMA TR8350.2 (WGS84 definition) derived constants (6,371,007.18 m, rounded as
#: given); 4*pi*R**2 = 510,065,625 km2, within 1e-8 of the ellipsoid's 510,065,622 km2.
AUTHALIC_RADIUS_M = 6371007.2

#: WGS84 semi-major axis, m. Source: NIMA TR8350.2 (2000), table 3.1.
WGS84_A_M = 6378137.0
#: WGS84 flattening, dimensionless. Source: NIMA TR8350.2 (2000), table 3.1.
WGS84_F = 1.0 / 298.257223563

#: Photon yield of daylight photosynthetically active radiation, umol photons per joule.
#: Source: McCree (1972), Agricultural Meteorology 10:443-453 (about 4.57 umol J-1 for daylight).
PAR_UMOL_PER_J = 4.57

#: Hours in a day, for day-length conversions.
HOURS_PER_DAY = 24.0
#: Seconds in a day, for daily-mean flux -> daily dose conversions.
SECONDS_PER_DAY = 86400.0

#: grams of carbon per teragram of carbon.
G_PER_TG = 1.0e12
