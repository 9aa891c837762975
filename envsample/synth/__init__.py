"""Maps made by code: analytic skies (with their closed forms) and the invented demo scenario."""
