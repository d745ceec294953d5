"""The bad-input catalog (fixtures/bad_inputs/): every case fails cleanly and safely.

For each case folder (written by fixtures/bad_inputs/make_cases.py) the
installed ``ruleguard`` command is run on a copy of the folder, next to
sentinel files holding a random secret (``../secret.toml``,
``../secret.csv``: where the traversal and symlink cases point). The test
asserts the contract of FORMATS.md section 6:

* exit status 2, no Python traceback, exactly one error line;
* the message names the file, line and key given in the case's
  ``expected.json`` and contains its expected word; where the case gives
  ``column`` and ``message`` (C, YAML and key-value firmware files), the
  column and the whole message are exactly those;
* the secret never appears in the output, and (in-process, with an audit
  hook on ``open`` and directory listings) no path outside the case folder
  is opened except Python's and ruleguard's own installed files;
* no input file changed (hashes of every file before and after).
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import secrets
import shutil
import subprocess
import sys
import sysconfig
from pathlib import Path

import pytest

import ruleguard
from ruleguard.cli import run

CATALOG = Path(__file__).resolve().parent.parent / "fixtures" / "bad_inputs"
CASES = sorted(p.name for p in CATALOG.iterdir() if (p / "expected.json").is_file())


def test_catalog_is_large_enough():
    # issue "Inputs as firmware repositories really hold them": at least 40 cases
    assert len(CASES) >= 40


def test_firmware_readers_have_exact_cases():
    # issue "Read parameters where firmware actually keeps them": at least 15
    # cases of the C, YAML and key-value readers, each with the exact message
    exact = [
        case for case in CASES
        if "message" in json.loads((CATALOG / case / "expected.json").read_text("utf-8"))
    ]
    assert len(exact) >= 15, exact


def _command() -> list[str]:
    script = shutil.which("ruleguard")
    if script:
        return [script]
    return [sys.executable, "-m", "ruleguard"]  # pragma: no cover - console script missing


def _hashes(folder: Path) -> dict[str, str]:
    result = {}
    for path in sorted(folder.rglob("*")):
        if path.is_symlink() or not path.is_file():
            continue
        result[str(path.relative_to(folder))] = hashlib.sha256(path.read_bytes()).hexdigest()
    return result


def _prepare(case: str, tmp_path: Path) -> tuple[Path, dict, str]:
    """Copy the case into tmp_path/case with sentinels beside it."""
    secret = "SENTINEL-" + secrets.token_hex(12)
    (tmp_path / "secret.toml").write_text(f'secret = "{secret}"\n', encoding="utf-8")
    (tmp_path / "secret.csv").write_text(
        f"freq_hz,magnitude_db,phase_deg\n# {secret}\n1,0,0\n2,0,0\n", encoding="utf-8"
    )
    folder = tmp_path / "case"
    shutil.copytree(CATALOG / case, folder, symlinks=True)
    expected = json.loads((folder / "expected.json").read_text(encoding="utf-8"))
    generate = expected.get("generate")
    if generate:
        line = "# " + "x" * 77 + "\n"
        count = generate["bytes"] // len(line) + 1
        (folder / generate["file"]).write_text(line * count, encoding="utf-8")
    return folder, expected, secret


def _check_message(output: str, expected: dict) -> None:
    assert "Traceback" not in output
    assert "internal error" not in output
    error_lines = [line for line in output.splitlines() if ": error:" in line]
    assert len(error_lines) == 1, output
    line = error_lines[0]
    place = expected["file"]
    if expected["line"] is not None:
        place += f":{expected['line']}:"
    assert line.startswith(place), f"expected {place!r} in {line!r}"
    if expected["key"]:
        assert f"[{expected['key']}]" in line, line
    assert expected["contains"] in line, line
    if "column" in expected:  # the readers of C, YAML and key-value files: exact place and text
        assert line.startswith(f"{place}{expected['column']}: error: "), line
        message = line.split(": error: ", 1)[1]
        if expected["key"]:
            message = message.removeprefix(f"[{expected['key']}] ")
        assert message == expected["message"], line


def _run_installed(case: str, tmp_path: Path) -> dict:
    folder, expected, secret = _prepare(case, tmp_path)
    before_copy = _hashes(folder)
    before_catalog = _hashes(CATALOG / case)
    result = subprocess.run(
        [*_command(), "check", "--manifest", str(folder / expected["manifest"])],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        timeout=300,
        env={**os.environ, "NO_COLOR": "1"},
    )
    return {
        "expected": expected,
        "secret": secret,
        "status": result.returncode,
        "output": result.stdout + result.stderr,
        "copy_unchanged": _hashes(folder) == before_copy,
        "catalog_unchanged": _hashes(CATALOG / case) == before_catalog,
        "pwned": (folder / "pwned").exists() or (tmp_path / "pwned").exists(),
    }


@pytest.fixture(scope="module")
def installed_runs(tmp_path_factory) -> dict:
    """Every case through the installed command, a few processes at a time."""
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=4) as pool:
        futures = {
            case: pool.submit(_run_installed, case, tmp_path_factory.mktemp(case))
            for case in CASES
        }
        return {case: future.result() for case, future in futures.items()}


@pytest.mark.parametrize("case", CASES)
def test_installed_command_rejects_case(case, installed_runs):
    run_result = installed_runs[case]
    output = run_result["output"]
    assert run_result["status"] == 2, output
    _check_message(output, run_result["expected"])
    assert run_result["secret"] not in output
    assert run_result["copy_unchanged"]
    assert run_result["catalog_unchanged"]
    assert not run_result["pwned"]


# ----------------------------------------------------------------- audit of reads

_AUDIT: dict = {"on": False, "paths": [], "listings": []}


def _hook(event: str, args: tuple) -> None:
    if not _AUDIT["on"]:
        return
    if event == "open" and args and isinstance(args[0], (str, bytes, os.PathLike)):
        _AUDIT["paths"].append(os.fsdecode(args[0]))
    elif event in ("os.listdir", "os.scandir") and args and args[0] is not None:
        if isinstance(args[0], (str, bytes, os.PathLike)):
            _AUDIT["listings"].append(os.fsdecode(args[0]))


sys.addaudithook(_hook)


def _allowed_roots(folder: Path) -> list[Path]:
    roots = {folder.resolve(), Path(ruleguard.__file__).resolve().parent}
    for key in ("stdlib", "platstdlib", "purelib", "platlib"):
        value = sysconfig.get_paths().get(key)
        if value:
            roots.add(Path(value).resolve())
    for prefix in (sys.prefix, sys.base_prefix, sys.exec_prefix):
        roots.add(Path(prefix).resolve())
    try:
        import ruleguard.rulesets as shipped

        roots.add(Path(shipped.__file__).resolve().parent)
    except ImportError:  # imported from a source checkout: its top-level rulesets/
        roots.add(Path(ruleguard.__file__).resolve().parents[1] / "rulesets")
    return list(roots)


@pytest.mark.parametrize("case", CASES)
def test_in_process_run_reads_only_the_case_folder(case, tmp_path):
    folder, expected, secret = _prepare(case, tmp_path)
    before = _hashes(folder)
    stdout, stderr = io.StringIO(), io.StringIO()
    manifest = str(folder / expected["manifest"])
    _AUDIT["paths"] = []
    _AUDIT["listings"] = []
    _AUDIT["on"] = True
    try:
        status = run(["check", "--manifest", manifest, "--no-cache"], stdout=stdout, stderr=stderr)
    finally:
        _AUDIT["on"] = False
    output = stdout.getvalue() + stderr.getvalue()
    assert status == 2, output
    _check_message(output, expected)
    assert secret not in output
    roots = _allowed_roots(folder)
    for opened in _AUDIT["paths"]:
        resolved = Path(opened if os.path.isabs(opened) else os.path.join(os.getcwd(), opened))
        resolved = resolved.resolve()
        assert resolved.name not in ("secret.toml", "secret.csv"), opened
        assert any(resolved.is_relative_to(root) for root in roots), opened
    # the import system lists the folders on sys.path; nothing else outside may be listed
    import_dirs = {Path(p or os.getcwd()).resolve() for p in sys.path}
    for listed in _AUDIT["listings"]:
        resolved = Path(listed).resolve()
        assert resolved in import_dirs or any(
            resolved.is_relative_to(root) for root in roots
        ), listed
    assert _hashes(folder) == before
