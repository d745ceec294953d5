"""Parameters from YAML files (``.yaml``, ``.yml``): safe, located, strict.

The text is composed into a node tree by PyYAML (its C ``CSafeLoader`` where
libyaml is built in, else the pure-Python ``SafeLoader``); ruleguard never
constructs Python objects from it. It walks the nodes itself:

* every node keeps the line and column PyYAML's scanner marked, so each
  value's key path maps to the position of its literal (a map or list to
  its key);
* tags other than YAML's own ``!!str``, ``!!int``, ``!!float``, ``!!bool``,
  ``!!null``, ``!!map``, ``!!seq`` (``!!python/object``, ``!custom``) are an
  input error: nothing is ever built from a tag;
* plain scalars are resolved by YAML 1.2's core schema (``1e3`` is a number;
  ``yes``/``on`` stay strings), quoted ones are strings;
* anchors, aliases and merge keys (``<<: *defaults``) are resolved, a
  recursive alias is an error and so is an expansion beyond
  :data:`MAX_VALUES` values;
* a key written twice in one map, a tab in indentation and a second
  document are errors.

Why PyYAML's composer: it is the most used YAML parser for Python, well kept,
its marks carry line and column, and composing (unlike loading) builds no
objects. tree-sitter-yaml would give positions too but leaves the scalar
resolution, anchors and merge keys to ruleguard. PyYAML is imported only when
a YAML file is read (measured in docs/formats-additions.md).
"""

from __future__ import annotations

import re
from typing import Any

from ruleguard.errors import InputError
from ruleguard.load.sources import Document, KeyPath, format_key, located_document

__all__ = ["MAX_VALUES", "parse_yaml"]

#: Most values one YAML file may expand to (aliases included).
MAX_VALUES = 100_000
_CORE = "tag:yaml.org,2002:"
_ALLOWED = {f"{_CORE}{name}" for name in ("str", "int", "float", "bool", "null", "map", "seq")}
_NULL = re.compile(r"^(?:~|null|Null|NULL|)$")
_BOOL = re.compile(r"^(?:true|True|TRUE|false|False|FALSE)$")
_INT = re.compile(r"^[-+]?[0-9]+$")
_OCT = re.compile(r"^0o[0-7]+$")
_HEX = re.compile(r"^0x[0-9a-fA-F]+$")
_FLOAT = re.compile(r"^[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?$")
_SPECIAL = re.compile(r"^(?:[-+]?\.(?:inf|Inf|INF)|\.(?:nan|NaN|NAN))$")


def _shown_tag(tag: str) -> str:
    return "!!" + tag[len(_CORE):] if tag.startswith(_CORE) else tag


def parse_yaml(name: str, text: str) -> Document:
    """Parse YAML ``text`` (file ``name``): values and positions.

    Raises
    ------
    InputError
        Syntax errors, tabs in indentation, unsafe tags, duplicate keys,
        recursive or exploding aliases, located at the offending token.
    """
    for number, line in enumerate(text.split("\n"), start=1):
        indent = re.match(r"^[ \t]*", line).group(0)
        if "\t" in indent and line.strip() and not line.lstrip().startswith("#"):
            raise InputError(
                name, number, indent.index("\t") + 1, "",
                f"a tab indents line {number}; YAML indents with spaces only",
            )
    import yaml

    loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
    try:
        root = yaml.compose(text, Loader=loader)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line, column = (mark.line + 1, mark.column + 1) if mark is not None else (None, None)
        problem = exc.problem or exc.context or "not YAML"
        opened = re.match(r"while parsing a flow (sequence|mapping)", exc.context or "")
        if exc.problem and opened and exc.context_mark is not None:
            what = "list" if opened.group(1) == "sequence" else "map"
            problem += (f" (the {what} opened at line {exc.context_mark.line + 1}, column "
                        f"{exc.context_mark.column + 1})")
        if problem.startswith("but found another document"):
            raise InputError(
                name, line, column, "",
                f"'{name}' holds more than one YAML document (---); ruleguard reads one",
            ) from None
        raise InputError(name, line, column, "", f"YAML syntax error: {problem}") from None
    except yaml.YAMLError as exc:
        raise InputError(name, None, None, "", f"YAML syntax error: {exc}") from None
    except RecursionError:
        raise InputError(name, 1, 1, "", "YAML nesting is too deep") from None
    if root is None:
        raise InputError(name, 1, 1, "", f"'{name}' holds no YAML document")
    walker = _Walker(name)
    try:
        data = walker.value(root, (), ())
    except RecursionError:
        raise InputError(name, 1, 1, "", "YAML nesting is too deep") from None
    return located_document(name, text, "yaml", data, walker.positions)


class _Walker:
    def __init__(self, name: str) -> None:
        self.name = name
        self.positions: dict[KeyPath, tuple[int, int]] = {}
        self.count = 0

    def error(self, node: Any, path: KeyPath, message: str) -> InputError:
        mark = node.start_mark
        return InputError(self.name, mark.line + 1, mark.column + 1, format_key(path), message)

    def value(self, node: Any, path: KeyPath, active: tuple) -> Any:
        import yaml

        self.count += 1
        if self.count > MAX_VALUES:
            raise self.error(node, path, f"YAML aliases expand to more than {MAX_VALUES} values")
        if node.tag not in _ALLOWED and node.tag != f"{_CORE}merge":
            raise self.error(
                node, path,
                f"the tag '{_shown_tag(node.tag)}' is not read; ruleguard loads YAML safely "
                "(maps, lists, numbers, strings, true/false, null)",
            )
        if id(node) in active:
            raise self.error(node, path, "a YAML alias refers to the map or list it is in")
        if isinstance(node, yaml.ScalarNode):
            self.positions.setdefault(path, (node.start_mark.line + 1, node.start_mark.column + 1))
            return _scalar(node)
        inner = active + (id(node),)
        if isinstance(node, yaml.SequenceNode):
            items = []
            for index, item in enumerate(node.value):
                self.positions.setdefault(
                    path + (index,), (item.start_mark.line + 1, item.start_mark.column + 1))
                items.append(self.value(item, path + (index,), inner))
            return items
        return self.mapping(node, path, inner)

    def mapping(self, node: Any, path: KeyPath, active: tuple) -> dict:
        import yaml

        result: dict[str, Any] = {}
        merges: list = []
        for key_node, value_node in node.value:
            if key_node.tag == f"{_CORE}merge":
                merges.append(value_node)
                continue
            if not isinstance(key_node, yaml.ScalarNode):
                raise self.error(key_node, path, "a YAML key must be a plain word or number")
            key = key_node.value
            if key in result:
                raise self.error(
                    key_node, path + (key,),
                    f"duplicate key '{key}' in a YAML map (keys must be unique)",
                )
            result[key] = self.value(value_node, path + (key,), active)
            self.positions.setdefault(  # a scalar is at its literal, a map or list at its key
                path + (key,), (key_node.start_mark.line + 1, key_node.start_mark.column + 1))
        for merge in merges:
            sources = merge.value if isinstance(merge, yaml.SequenceNode) else [merge]
            for source in sources:
                if not isinstance(source, yaml.MappingNode):
                    raise self.error(source, path, "a YAML merge key (<<) takes a map")
                merged = self.mapping(source, path + ("<<",), active + (id(source),))
                for key, value in merged.items():
                    if key not in result:
                        result[key] = value
                        where = self.positions.get(path + ("<<", key))
                        if where is not None:
                            self.positions[path + (key,)] = where
        for key in [k for k in self.positions if k[: len(path) + 1] == path + ("<<",)]:
            del self.positions[key]
        return result


def _scalar(node: Any) -> Any:
    text = node.value
    if node.style in ("'", '"', "|", ">"):  # quoted or block: a string
        return text
    if _NULL.match(text):
        return None
    if _BOOL.match(text):
        return text.lower() == "true"
    if _INT.match(text):
        return int(text)
    if _OCT.match(text):
        return int(text[2:], 8)
    if _HEX.match(text):
        return int(text[2:], 16)
    if _FLOAT.match(text):
        return float(text)
    if _SPECIAL.match(text):
        return float(text.replace(".", "", 1).lower())
    return text
