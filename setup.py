"""Build of the optional compiled accelerator (metadata lives in pyproject.toml).

``auditor._native`` holds per-event loops of the audit written in C. It is
optional: where it cannot be built (no C compiler) the package installs
without it and uses the NumPy implementations, which give the same results
more slowly.
"""

from setuptools import Extension, setup

setup(ext_modules=[Extension(
    "auditor._native", ["auditor/_native.c"], optional=True,
    # IEEE arithmetic as written: no fast-math, no fused multiply-add contraction;
    # sqrt need not set errno (its results are unchanged), so loops over it vectorise.
    extra_compile_args=["-O3", "-ffp-contract=off", "-fno-fast-math", "-fno-math-errno"])])
