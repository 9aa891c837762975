"""Reference values the estimators are judged against: exact irradiance (Arvo 1995), a GGX glossy
quadrature, and the order-2 spherical-harmonic approximation (for tests only)."""
