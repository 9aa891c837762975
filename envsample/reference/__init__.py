"""Reference values the estimators are judged against: exact irradiance (Arvo 1995; :mod:`.irradiance`,
compiled kernel with a numpy fallback in :mod:`.boundary`), a GGX glossy quadrature (:mod:`.glossy`), and
the order-2 spherical-harmonic approximation (:mod:`.sh9`, for tests only); :mod:`.grid` holds the cell grid."""
