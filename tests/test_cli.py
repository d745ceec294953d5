"""The command-line shell: exit statuses and streams (FORMATS.md section 6)."""

import io
import subprocess
import sys

from ruleguard import __version__
from ruleguard.cli import run


def _run(*argv):
    out, err = io.StringIO(), io.StringIO()
    code = run(list(argv), stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


def test_version():
    code, out, _ = _run("--version")
    assert code == 0
    assert out.strip() == f"ruleguard {__version__}"


def test_unknown_option_is_a_usage_error_with_status_2():
    code, _, err = _run("check", "--no-such-option")
    assert code == 2
    assert "Traceback" not in err
    assert "--no-such-option" in err


def test_no_command_prints_usage_and_returns_2():
    code, out, _ = _run()
    assert code == 2
    assert "check" in out


def test_bad_date_is_an_input_error():
    code, _, err = _run("check", "--as-of", "2026-13-45", "--manifest", "x.toml")
    assert code == 2
    assert "--as-of" in err


def test_missing_manifest_is_an_input_error(tmp_path):
    code, _, err = _run("check", "--manifest", str(tmp_path / "nope.toml"))
    assert code == 2
    assert "Traceback" not in err
    assert "nope.toml" in err


def test_python_dash_m_entry_point():
    result = subprocess.run(
        [sys.executable, "-m", "ruleguard", "--version"], capture_output=True, text=True
    )
    assert result.returncode == 0
    assert result.stdout.strip() == f"ruleguard {__version__}"
