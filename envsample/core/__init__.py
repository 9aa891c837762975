"""Foundations every layer uses: the direction convention and exact solid angles, lat-long grids, luminance,
published constants, atomic file writes and how numbers are written for people.

Pure functions on numpy arrays; nothing here imports another envsample package."""
