"""Lazy module loading (the recipe of the importlib documentation, as scientific Python's SPEC 1 uses).

The command line imports its workflows through ``lazy_import`` so that ``chimeline --help`` does not pay for
numpy, scipy and the stages; the module is executed on first attribute access.
"""
from __future__ import annotations

import importlib.util
import sys


def lazy_import(name: str):
    """A module object for ``name`` that executes the module on first attribute access."""
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.find_spec(name)
    if spec is None:
        raise ModuleNotFoundError(name)
    loader = importlib.util.LazyLoader(spec.loader)
    spec.loader = loader
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    loader.exec_module(module)
    return module
