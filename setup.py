"""Build the optional compiled kernels; everything else is in pyproject.toml.

``optional=True``: where no C compiler is available the install still succeeds and
envsample uses its numpy code paths (see envsample/core/kernels.py).
"""

from setuptools import Extension, setup

setup(
    ext_modules=[
        Extension(
            "envsample.sampling._kernels",
            ["envsample/sampling/_kernels.c"],
            optional=True,
            extra_compile_args=["-O2", "-fno-fast-math"],
        ),
        Extension(
            "envsample.reference._kernels",
            ["envsample/reference/_kernels.c"],
            optional=True,
            extra_compile_args=["-O2", "-fno-fast-math"],
        ),
    ]
)
