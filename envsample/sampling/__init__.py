"""Importance sampling: piecewise-constant distributions (CDFs, alias tables), the environment table
(:class:`EnvTable`), the compiled-kernel switch, and the BSDF / hemisphere sampling strategies."""
