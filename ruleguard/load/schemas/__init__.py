"""JSON Schemas of ruleguard's inputs and of its JSON report.

Each schema is a file ``<name>.schema.json`` beside this module (JSON Schema
draft 2020-12). ``ruleguard schema NAME`` prints one so editors can validate
files as they are written.
"""

from __future__ import annotations

import json
from functools import cache
from pathlib import Path

_HERE = Path(__file__).resolve().parent
_SUFFIX = ".schema.json"


def schema_names() -> tuple[str, ...]:
    """Names of the shipped schemas, sorted (``manifest``, ``plants``, ...)."""
    return tuple(sorted(p.name[: -len(_SUFFIX)] for p in _HERE.glob("*" + _SUFFIX)))


def schema_text(name: str) -> str:
    """The text of schema ``name``.

    Raises
    ------
    KeyError
        ``name`` is not a shipped schema (the message lists the known names).
    """
    if name not in schema_names():
        raise KeyError(f"no schema named '{name}'; known: {', '.join(schema_names())}")
    return (_HERE / (name + _SUFFIX)).read_text(encoding="utf-8")


@cache
def load_schema(name: str) -> dict:
    """The parsed schema ``name`` (cached)."""
    return json.loads(schema_text(name))
