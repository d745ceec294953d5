"""Changed-files mode: which loops a set of changed files can affect.

``ruleguard check FILE...`` (and so a pre-commit hook, which passes the staged
file names) checks only the loops whose result may depend on one of the
files. The rule:

* A loop depends on its **inputs**: the manifest (which holds its entry), the
  plant registry file of its plant entry and of its sensor entry, the CSV of
  a measured plant, the controller file, and the ruleset file (a user
  ruleset; a built-in ruleset ships with ruleguard and is no file of the
  project). ``Project.inputs`` lists them as the loader found them; the
  entries named in the loop spec are added here as well.
* A cascade's outer loop depends on the inputs of its inner loops too (the
  closed inner loop is part of its plant).
* **The manifest and the ruleset affect every loop**: a change to either
  selects all loops. (Which manifest entry changed is not known from a file
  name; a ruleset change may move any threshold, override or waiver.)
  Rulesets a user ruleset extends count as ruleset files when the caller
  passes them in ``ruleset_files``.
* Paths are taken relative to ``cwd`` and normalised against the manifest's
  folder; files outside that folder, or that no loop uses, select nothing.
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

RULESET_SUFFIXES = (".toml", ".json")


def ruleset_file(project) -> str | None:
    """The project's ruleset as a file relative to the manifest folder, or
    ``None`` for a built-in ruleset name."""
    ref = str(project.ruleset or "")
    if not ref or not (ref.endswith(RULESET_SUFFIXES) or "/" in ref or "\\" in ref):
        return None
    return _normalise_relative(ref)


def _normalise_relative(rel: str) -> str:
    return Path(os.path.normpath(rel.replace("\\", "/"))).as_posix()


def _spec_files(project, spec) -> set[str]:
    files: set[str] = set()
    controller = getattr(spec, "controller", None)
    if controller is not None and getattr(controller, "file", None):
        files.add(controller.file)
    for entry_name in (spec.plant, spec.sensor):
        entry = project.plants.get(entry_name) if entry_name else None
        if entry is None:
            continue
        if entry.file:
            files.add(entry.file)
        measured = getattr(entry, "measured", None)
        if measured is not None and getattr(measured, "file", None):
            files.add(measured.file)
        data_file = entry.fields.get("file") if hasattr(entry, "fields") else None
        if isinstance(data_file, str):
            files.add(data_file)
    return files


def loop_input_files(project, loop_name: str) -> frozenset[str]:
    """Every file (relative to the manifest folder) the loop's result depends on."""
    specs = {spec.name: spec for spec in project.loops}
    files: set[str] = set()
    seen: set[str] = set()
    name: str | None = loop_name
    while name is not None and name in specs and name not in seen:
        seen.add(name)
        spec = specs[name]
        files |= set(project.inputs.get(name, ()))
        files |= _spec_files(project, spec)
        name = spec.inner
    files.add(project.manifest_file)
    ruleset = ruleset_file(project)
    if ruleset is not None:
        files.add(ruleset)
    return frozenset(_normalise_relative(f) for f in files if f)


def _relative_to_root(path: str, cwd: str | os.PathLike, root: Path) -> set[str]:
    """``path`` relative to ``root`` (posix), both as written and with
    symlinks resolved; empty when it lies outside the root."""
    absolute = Path(path) if os.path.isabs(path) else Path(cwd) / path
    found: set[str] = set()
    for candidate, base in (
        (Path(os.path.normpath(absolute)), Path(os.path.normpath(root))),
        (absolute.resolve(), root.resolve()),
    ):
        try:
            found.add(candidate.relative_to(base).as_posix())
        except ValueError:
            continue
    return found


def loops_for_files(
    project,
    paths: list[str],
    cwd: str | os.PathLike,
    ruleset_files: Iterable[str] = (),
) -> set[str]:
    """Names of the loops whose inputs are among ``paths``.

    Parameters
    ----------
    project:
        The loaded :class:`~ruleguard.load.spec.Project`.
    paths:
        Changed files, relative to ``cwd`` (or absolute).
    cwd:
        The folder the paths are relative to (the repository root for a
        pre-commit hook).
    ruleset_files:
        Further ruleset files (relative to the manifest folder), e.g. the
        user rulesets that the project's ruleset extends.
    """
    root = Path(project.root)
    changed: set[str] = set()
    for path in paths:
        changed |= _relative_to_root(str(path), cwd, root)
    if not changed:
        return set()
    every = {spec.name for spec in project.loops}
    global_files = {_normalise_relative(project.manifest_file)}
    global_files |= {_normalise_relative(f) for f in ruleset_files}
    own_ruleset = ruleset_file(project)
    if own_ruleset is not None:
        global_files.add(own_ruleset)
    if changed & global_files:
        return every
    return {name for name in every if loop_input_files(project, name) & changed}
