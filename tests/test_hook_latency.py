"""The fast routes of a pre-commit hook give the same output as the slow ones.

* a run whose loops all come from the cache prints byte for byte what a
  cold run prints (JSON, SARIF, text), and imports neither numpy, scipy,
  jsonschema nor rich;
* the validation memo (``validated.json`` in the cache folder) skips only
  what passed: an invalid edit still gets its located message;
* the plain text writer lays out exactly what rich lays out;
* ``--timings`` lists the stages on stderr and leaves stdout unchanged.

No timing is asserted here (benchmarks/bench_hook.py measures).
"""

from __future__ import annotations

import io
import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from sample_reports import clean_report, sample_report

from ruleguard import cli
from ruleguard.cache import CACHE_FOLDER, VALIDATED_FILE
from ruleguard.load import validation
from ruleguard.report import text

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"
AS_OF = "2026-12-02"


@pytest.fixture
def demo(tmp_path):
    target = tmp_path / "demo"
    shutil.copytree(DEMO, target, ignore=shutil.ignore_patterns(CACHE_FOLDER))
    return target


def _run(args: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = cli.run(args, out, err)
    return code, out.getvalue(), err.getvalue()


def _stricter(demo: Path) -> None:
    """Ask 70 deg of phase margin, so that loops have findings (and the waiver is judged)."""
    policy = demo / "policy" / "mast-house.toml"
    text_ = policy.read_text(encoding="utf-8")
    assert "min_deg = 45.0" in text_
    policy.write_text(text_.replace("min_deg = 45.0", "min_deg = 70.0", 1), encoding="utf-8")


@pytest.mark.parametrize("strict", [False, True])
@pytest.mark.parametrize("fmt", ["json", "sarif", "text"])
def test_warm_cache_run_prints_what_a_cold_run_prints(demo, fmt, strict):
    if strict:
        _stricter(demo)
    manifest = str(demo / "ruleguard.toml")
    base = ["check", "--manifest", manifest, "--format", fmt, "--as-of", AS_OF]
    cold = _run([*base, "--no-cache"])
    first = _run(base)  # fills the cache
    warm = _run(base)
    assert cold[0] == first[0] == warm[0]
    assert cold[1] == first[1] == warm[1]
    changed = _run([*base, str(demo / "firmware" / "tilt.toml")])
    changed_cold = _run([*base, "--no-cache", str(demo / "firmware" / "tilt.toml")])
    assert changed == changed_cold
    if fmt != "sarif":
        assert "tilt.velocity" in changed[1] and "pan.velocity" not in changed[1]
    if strict:
        assert "margin.phase" in warm[1] and warm[0] == 1


_PROBE = """
import io, sys
from ruleguard.cli import run
code = run(sys.argv[1:], io.StringIO(), sys.stderr)
heavy = sorted(m for m in ("numpy", "scipy", "jsonschema", "rich") if m in sys.modules)
print(code, ",".join(heavy))
"""


def test_cache_hit_route_imports_no_heavy_module(demo):
    args = ["check", "--manifest", str(demo / "ruleguard.toml"), "--as-of", AS_OF]
    first = subprocess.run([sys.executable, "-c", _PROBE, *args], capture_output=True, text=True)
    code, heavy = first.stdout.split()
    assert code == "1"  # the demo has errors (it shows findings)
    assert "numpy" in heavy  # the cold run analysed the loops
    warm = subprocess.run([sys.executable, "-c", _PROBE, *args], capture_output=True, text=True)
    assert warm.stdout.split() == [code], warm.stdout + warm.stderr


def test_validation_memo_kept_and_trusted_only_for_what_passed(demo):
    manifest = str(demo / "ruleguard.toml")
    base = ["check", "--manifest", manifest, "--format", "json", "--as-of", AS_OF]
    assert _run(base)[0] == 1  # the demo has errors
    memo = json.loads((demo / CACHE_FOLDER / VALIDATED_FILE).read_text(encoding="utf-8"))
    assert len(memo["digests"]) >= 10  # manifest, registry entries, controllers, ruleset
    _, _, err = _run([*base, "--timings"])
    assert "validations remembered" in err and "validations run" not in err

    tilt = demo / "firmware" / "tilt.toml"
    content = tilt.read_text(encoding="utf-8")
    assert 'form = "parallel"' in content
    tilt.write_text(content.replace('form = "parallel"', 'form = "paralel"', 1), encoding="utf-8")
    cached = _run(base)
    uncached = _run([*base, "--no-cache"])
    assert cached[0] == uncached[0] == 2
    assert cached[2] == uncached[2]
    assert "firmware/tilt.toml:7:" in cached[2] and "paralel" in cached[2]


def test_validation_digest_names_version_schema_and_typed_value(monkeypatch):
    one = validation.validation_digest("controller", {"kp": 1})
    assert one == validation.validation_digest("controller", {"kp": 1})
    assert one != validation.validation_digest("controller", {"kp": 1.0})
    assert one != validation.validation_digest("controller", {"kp": True})
    assert one != validation.validation_digest("controller", {"kp": "1"})
    assert one != validation.validation_digest("manifest", {"kp": 1})
    monkeypatch.setattr(validation, "__version__", "999.0")
    assert one != validation.validation_digest("controller", {"kp": 1})


def test_memo_of_another_version_is_ignored(demo):
    manifest = str(demo / "ruleguard.toml")
    base = ["check", "--manifest", manifest, "--format", "json", "--as-of", AS_OF]
    _run(base)
    path = demo / CACHE_FOLDER / VALIDATED_FILE
    data = json.loads(path.read_text(encoding="utf-8"))
    data["tool_version"] = "0.0.0-other"
    path.write_text(json.dumps(data), encoding="utf-8")
    _, _, err = _run([*base, "--timings"])
    assert "validations run" in err and "validations remembered" not in err


def test_no_cache_writes_no_memo(demo):
    _run(["check", "--manifest", str(demo / "ruleguard.toml"), "--no-cache"])
    assert not (demo / CACHE_FOLDER).exists()


# ------------------------------------------------------------- plain text writer
def _both(report, quiet=False, width=100):
    rich = text._draw(text._RichOut(width, False), report, quiet, None)
    try:
        plain = text._draw(text._PlainOut(width), report, quiet, None)
    except text._NeedsRich:
        plain = None
    return rich, plain


@pytest.mark.parametrize("quiet", [False, True])
@pytest.mark.parametrize("make", [sample_report, clean_report])
def test_plain_writer_matches_rich(make, quiet):
    rich, plain = _both(make(), quiet)
    assert plain is not None
    assert plain == rich


def test_plain_writer_matches_rich_on_the_demo():
    import datetime as dt

    from ruleguard.pipeline import CheckOptions, check_project

    report = check_project(DEMO / "ruleguard.toml", CheckOptions(today=dt.date(2026, 12, 2)))
    rich, plain = _both(report)
    assert plain == rich


def test_plain_writer_leaves_what_it_cannot_promise_to_rich():
    # a table wider than 60 columns is wrapped by rich: the plain writer declines
    assert _both(sample_report(), width=60)[1] is None
    # a tab in a message: rich expands it, the plain writer declines
    report = sample_report()
    odd = report.findings[0].__class__(
        **{**report.findings[0].__dict__, "message": "tab\there"}
    )
    odd_report = sample_report(findings=(odd,))
    rich, plain = _both(odd_report)
    assert plain is None
    assert text.render(odd_report) == rich


# ------------------------------------------------------------- --timings
def test_timings_list_the_stages_on_stderr_and_leave_stdout_alone(demo):
    base = ["check", "--manifest", str(demo / "ruleguard.toml"), "--format", "json",
            "--as-of", AS_OF, "--no-cache"]
    plain_code, plain_out, plain_err = _run(base)
    code, out, err = _run([*base, "--timings"])
    assert code == plain_code
    assert out == plain_out
    assert "timings" not in plain_err
    rows = {line.split()[0] for line in err.splitlines() if line.startswith("  ")}
    for name in ("load", "validation", "build", "analysis", "rules", "report", "total"):
        assert name in rows, err
    total = next(
        float(line.split()[1]) for line in err.splitlines() if line.split()[:1] == ["total"]
    )
    stages = [
        float(line.split()[1]) for line in err.splitlines()
        if line.startswith("  ") and line.split()[0] not in ("stage", "total")
        and line.rstrip().endswith("%")
    ]
    assert sum(stages) == pytest.approx(total, abs=0.01)
    json.loads(out)  # stdout stays one JSON document


def test_timings_of_a_warm_run_count_cache_hits(demo):
    base = ["check", "--manifest", str(demo / "ruleguard.toml"), "--as-of", AS_OF]
    _run(base)
    _, _, err = _run([*base, "--timings"])
    loops = (demo / "ruleguard.toml").read_text(encoding="utf-8").count("[[loops]]")
    assert f"loops from the cache: {loops}" in err
    assert "loops analysed: 0" in err
