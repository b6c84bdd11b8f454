"""Only here for cffi_modules: compiles the C core (c_core/) into peerfix.core._pfx.

All other metadata lives in pyproject.toml.
"""

from setuptools import setup

setup(cffi_modules=["python/peerfix/core/_build.py:ffibuilder"])
