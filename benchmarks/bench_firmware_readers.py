"""Cost of the firmware readers: import (fresh process) and parse, side by side.

The same 40 PID gain sets are written as TOML, a C header (#define and a
struct array), YAML and a flat key-value file; each is parsed with its
reader and its source map built (positions of every value). Import costs are
measured in a fresh interpreter each (median of --runs), so the figures show
what a pre-commit hook pays on the first file of each kind. Also shown: that
importing the command imports none of the new readers. Run from the
repository root:

    python benchmarks/bench_firmware_readers.py [--runs 5]
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time

SETS = 40


def _import_ms(statement: str, runs: int) -> float:
    # ruleguard's own loading modules are imported first: the figure is what
    # the reader adds to a run that reads manifests already
    code = ("import time, ruleguard.load.sources; t = time.perf_counter(); " + statement
            + "; print((time.perf_counter() - t) * 1000)")
    values = [float(subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                                   check=True).stdout) for _ in range(runs)]
    return statistics.median(values)


def _texts() -> dict[str, str]:
    gains = [(0.1 + i * 0.01, 10.0 + i, 0.001 * i) for i in range(SETS)]
    toml = "".join(f"[axis{i}]\nkind = \"pid\"\nkp = {p!r}\nki = {q!r}\nkd = {d!r}\n\n"
                   for i, (p, q, d) in enumerate(gains))
    c = "#ifndef G_H\n#define G_H\ntypedef struct { float kp; float ki; float kd; } g_t;\n"
    c += "".join(f"#define AXIS{i}_KP {p!r}f\n" for i, (p, _, _) in enumerate(gains))
    c += "static const g_t axes[] = {\n" + "".join(
        f"    {{ .kp = {p!r}f, .ki = {q!r}f, .kd = {d!r}f }},\n" for p, q, d in gains)
    c += "};\n#endif\n"
    yaml = "".join(f"axis{i}:\n  kind: pid\n  kp: {p!r}\n  ki: {q!r}\n  kd: {d!r}\n"
                   for i, (p, q, d) in enumerate(gains))
    keyvalue = "".join(f"AXIS{i}_KP = {p!r}\nAXIS{i}_KI = {q!r}\nAXIS{i}_KD = {d!r}\n"
                       for i, (p, q, d) in enumerate(gains))
    return {"toml": toml, "c": c, "yaml": yaml, "keyvalue": keyvalue}


def _parse_ms(fmt: str, text: str, runs: int) -> float:
    from ruleguard.load.c_source import parse_c
    from ruleguard.load.keyvalue_source import parse_keyvalue
    from ruleguard.load.sources import parse_text
    from ruleguard.load.yaml_source import parse_yaml

    parse = {"toml": lambda t: parse_text("f.toml", t, "toml"), "c": lambda t: parse_c("f.h", t),
             "yaml": lambda t: parse_yaml("f.yaml", t),
             "keyvalue": lambda t: parse_keyvalue("f.params", t)}[fmt]
    assert parse(text).source_map  # warm: parsers built, modules imported
    times = []
    for _ in range(runs * 5):
        start = time.perf_counter()
        located = parse(text).source_map
        times.append(time.perf_counter() - start)
        assert len(located) > SETS
    return statistics.median(times) * 1000


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--runs", type=int, default=5)
    runs = parser.parse_args().runs
    print(f"import added to ruleguard.load.sources, fresh process, median of {runs} (ms):")
    base = _import_ms("pass", runs)
    rows = [
        ("TOML positions (tree-sitter-toml)", "import tree_sitter, tree_sitter_toml"),
        ("C reader (tree-sitter-c)", "import ruleguard.load.c_source, tree_sitter_c"),
        ("YAML reader (PyYAML)", "import ruleguard.load.yaml_source, yaml"),
        ("key-value reader", "import ruleguard.load.keyvalue_source"),
    ]
    toml_ms = None
    for label, statement in rows:
        value = _import_ms(statement, runs) - base
        toml_ms = value if toml_ms is None else toml_ms
        print(f"  {label:36s} {value:7.1f}   ratio to TOML {value / toml_ms:5.2f}")
    code = ("import sys, ruleguard.cli; print(sorted(m for m in sys.modules if m in "
            "('yaml', 'tree_sitter_c', 'ruleguard.load.c_source', 'ruleguard.load.yaml_source',"
            " 'ruleguard.load.keyvalue_source')))")
    loaded = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            check=True).stdout.strip()
    print(f"  readers imported by 'import ruleguard.cli': {loaded}")
    print(f"parse + source map of {SETS} gain sets, warm, median (ms):")
    texts = _texts()
    reference = _parse_ms("toml", texts["toml"], runs)
    for fmt, text in texts.items():
        value = _parse_ms(fmt, text, runs)
        ratio = value / reference
        print(f"  {fmt:9s} {len(text):6d} bytes {value:7.2f}   ratio to TOML {ratio:5.2f}")


if __name__ == "__main__":
    main()
