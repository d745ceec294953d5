"""Modules imported on first use, for modules whose import must stay cheap.

The rule families are imported by every run (the report lists the whole
rules table, the ruleset loader checks parameters against it), but a run
whose loops all come from the cache never evaluates a rule: importing numpy
(about 0.2 s in a fresh process) for it would be most of a pre-commit hook's
time. ``from ruleguard.deferred import numpy as np`` gives a stand-in whose
first attribute access imports the real module; each attribute read is then
kept on the stand-in, so later reads cost what a module attribute costs.
"""

from __future__ import annotations

import importlib
from typing import Any


class DeferredModule:
    """Stands for the module ``name``; imports it at the first attribute read."""

    def __init__(self, name: str) -> None:
        self._deferred_name = name

    def __getattr__(self, attribute: str) -> Any:
        if attribute.startswith("__"):
            raise AttributeError(attribute)
        value = getattr(importlib.import_module(self._deferred_name), attribute)
        setattr(self, attribute, value)
        return value

    def __repr__(self) -> str:
        return f"<deferred module {self._deferred_name!r}>"


numpy: Any = DeferredModule("numpy")
discretize: Any = DeferredModule("ruleguard.models.discretize")
arrays: Any = DeferredModule("ruleguard.models.arrays")
