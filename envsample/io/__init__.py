"""Files in and out: environment maps (OpenEXR, Radiance RGBE, refused LDR images) and the sampling-table format.

Depends on :mod:`envsample.core` only."""
