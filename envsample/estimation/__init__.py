"""Monte Carlo estimators of irradiance and glossy reflection: MIS heuristics and the named estimators."""
