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


def _leave_in_a_child(body: str) -> subprocess.CompletedProcess:
    script = "import atexit, sys, threading, time\nfrom ruleguard.cli import leave\n" + body
    return subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)


def test_leave_runs_exit_functions_flushes_and_keeps_the_status():
    # No newline and no explicit flush: the text sits in the stream's buffer
    # until leave() flushes it; the atexit function must still run once.
    result = _leave_in_a_child(
        "atexit.register(lambda: print('exit function ran', file=sys.stderr))\n"
        "sys.stdout.write('report without newline')\n"
        "leave(3)\n"
        "print('not reached')\n"
    )
    assert result.returncode == 3
    assert result.stdout == "report without newline"
    assert result.stderr.count("exit function ran") == 1


def test_leave_waits_for_a_live_thread_by_the_ordinary_exit():
    result = _leave_in_a_child(
        "worker = threading.Thread(target=lambda: (time.sleep(0.2), print('thread done')))\n"
        "worker.start()\n"
        "leave(1)\n"
    )
    assert result.returncode == 1
    assert result.stdout == "thread done\n"


def test_console_entry_point_exit_status_is_the_commands(tmp_path):
    # `python -m ruleguard` goes through console(): a missing manifest is
    # status 2 (FORMATS.md section 6), with the message on stderr.
    result = subprocess.run(
        [sys.executable, "-m", "ruleguard", "check", "--manifest", str(tmp_path / "nope.toml")],
        capture_output=True, text=True,
    )
    assert result.returncode == 2
    assert "nope.toml" in result.stderr


DEMO = __import__("pathlib").Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"


def _repo_with_demo_in_subfolder(tmp_path):
    import shutil

    shutil.copytree(DEMO, tmp_path / "controls", ignore=shutil.ignore_patterns(".ruleguard-cache"))
    return tmp_path


def test_changed_files_find_a_manifest_in_a_subfolder(tmp_path, monkeypatch):
    # A pre-commit hook runs at the repository root and passes staged names.
    repo = _repo_with_demo_in_subfolder(tmp_path)
    monkeypatch.chdir(repo)
    code, out, err = _run(
        "check", "controls/plc/heater_params.json", "--no-cache", "--as-of", "2026-12-01", "-q"
    )
    assert code == 1, err
    # GNU lines are relative to where the command runs, so editors open them
    first = out.splitlines()[0]
    assert first.startswith("controls/plc/heater_params.json:7:7: error: margin.gain")


def test_files_of_no_project_leave_the_usual_error(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "notes.toml").write_text("x = 1\n")
    code, _, err = _run("check", "notes.toml")
    assert code == 2
    assert "ruleguard.toml" in err


def test_rules_lists_the_project_ruleset(tmp_path, monkeypatch):
    repo = _repo_with_demo_in_subfolder(tmp_path)
    monkeypatch.chdir(repo / "controls")
    code, out, _ = _run("rules")
    assert code == 0
    assert "mast-house" in out
    monkeypatch.chdir(tmp_path.parent)
    code, out, _ = _run("rules", "--ruleset", "flight")
    assert code == 0 and "flight" in out
