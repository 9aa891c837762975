"""Quality checks for equirectangular HDR environment maps, with profiles and reports.

Modules
-------
- :mod:`~envsample.qa.run`: :func:`check_map` runs every enabled check on a file or an
  in-memory map and returns a :class:`~envsample.qa.results.Report`.
- :mod:`~envsample.qa.results`: :class:`Report`, :class:`CheckResult`, :class:`Source`;
  ``Report.to_dict()`` is the JSON report, ``Report.exit_code()`` the CLI status.
- :mod:`~envsample.qa.profile`: :func:`load_profile`, :class:`Profile`, :class:`ProfileError`:
  thresholds from TOML; ``envsample/qa/profiles/default.toml`` holds every default, with its provenance.
- :mod:`~envsample.qa.context`: :class:`CheckContext`, what every check may use.
- :mod:`~envsample.qa.emitters`: bright connected regions (suns, lamps) shared by several checks.
- :mod:`~envsample.qa.checks`: the checks by family and the registry :data:`CHECKS`.
- :mod:`~envsample.qa.report`: :func:`format_report` (terminal table), :func:`report_to_json`.

Adding a check: write ``def check_name(ctx) -> CheckResult`` in the family module of
``envsample/qa/checks/``, add ``"name": check_name`` to :data:`CHECKS` and a ``[name]``
section (with ``enabled = true`` and its thresholds) to ``profiles/default.toml``.  The
profile loader derives the valid keys from that file.

Conventions
-----------
The map follows :mod:`envsample.core.sphere`: row 0 is the zenith, azimuth
``phi = 2*pi*(u - 0.5)`` (0 at the image centre, positive to the right, +-180 deg at
the seam), elevation ``90 deg - theta``.  Degrees appear only in messages and
report values; computations are in radians.  Solid angles are steradians (exact
per-pixel solid angles), luminance uses the profile's primaries, and integrals are
float64.  Photometric values (irradiance, lux) are estimates for asset
preparation, not certified lighting calculations.
"""
