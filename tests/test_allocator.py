"""The allocator settings of the processes that analyse many loops (ruleguard.allocator).

Outside references: glibc's ``mallopt(3)`` (Linux man-pages) for what
``M_MMAP_THRESHOLD`` and ``M_TRIM_THRESHOLD`` do, and the kernel's own
count of minor page faults, ``ru_minflt`` of ``getrusage(2)``, for the
effect. Each check runs in a fresh interpreter, whose allocator has no
history of earlier tests.
"""

import os
import subprocess
import sys

import pytest

from ruleguard import allocator
from ruleguard.executors import ProcessExecutor

GLIBC = bool(getattr(os, "confstr", None) and os.confstr("CS_GNU_LIBC_VERSION"))
needs_glibc = pytest.mark.skipif(not GLIBC, reason="the settings exist on glibc only")

# 50 rounds of three 1 MB arrays, every page written, then freed: the minor
# page faults of those rounds (the first three rounds warm up)
_FAULTS = """
import resource, sys
import numpy as np
if sys.argv[1] == "tuned":
    from ruleguard.allocator import keep_freed_memory
    assert keep_freed_memory()
def faults():
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt
for _ in range(3):
    blocks = [np.ones(65536, dtype=complex) for _ in range(3)]
    del blocks
start = faults()
for _ in range(50):
    blocks = [np.ones(65536, dtype=complex) for _ in range(3)]
    del blocks
print(faults() - start)
"""


def _python(code: str, *args: str, **env: str) -> str:
    result = subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True,
                            check=True, env={**os.environ, **env}, timeout=120)
    return result.stdout.strip()


@needs_glibc
def test_tuned_allocator_reuses_freed_pages():
    # mallopt(3): blocks below M_MMAP_THRESHOLD come from the heap, and free
    # memory at its top up to M_TRIM_THRESHOLD stays in the process; so the
    # same arrays made again touch pages already mapped: no new faults. With
    # glibc's own settings the 3 MB freed at the top exceed its trim threshold
    # and go back to the kernel (measured here: 24,000 faults in 50 rounds).
    plain = int(_python(_FAULTS, "plain"))
    tuned = int(_python(_FAULTS, "tuned"))
    assert plain > 1000
    assert tuned < 0.05 * plain


@needs_glibc
def test_settings_take_effect_once_and_can_be_turned_off():
    code = ("from ruleguard import allocator; "
            "print(allocator.keep_freed_memory(), allocator.keep_freed_memory())")
    assert _python(code) == "True True"
    assert _python(code, **{allocator.OPT_OUT_VARIABLE: "system"}) == "False False"


def _tuned_state():
    return allocator._TUNED[0]


def test_pool_workers_are_tuned_and_a_library_caller_is_not():
    executor = ProcessExecutor(None, 2)
    try:
        states = {executor._pool.submit(_tuned_state).result() for _ in range(4)}
    finally:
        executor.close()
    assert states == {GLIBC}
    # a check through ruleguard.cli.run, as a program calling it makes: left alone
    demo = os.path.join(os.path.dirname(__file__), "..", "fixtures", "gimbal_demo",
                        "ruleguard.toml")
    code = ("import io, sys; from ruleguard import allocator; from ruleguard.cli import run; "
            "code = run(['check', sys.argv[1], '--format', 'json', '--no-cache', '--jobs', '2'], "
            "io.StringIO(), io.StringIO()); print(code, allocator._TUNED[0])")
    assert _python(code, os.path.abspath(demo)) == "1 None"


def test_the_command_tunes_itself_only_when_it_analyses_many_variants(monkeypatch):
    from ruleguard import cli
    from ruleguard.executors import PARALLEL_MIN_VARIANTS

    code = ("import sys; from ruleguard import allocator, executors; "
            "claim, n = sys.argv[1] == 'claimed', int(sys.argv[2]); "
            "claim and allocator.claim_process(); "
            "executors.make_executor(None, 'local', 1, n); print(allocator._TUNED[0])")
    many, few = str(PARALLEL_MIN_VARIANTS), str(PARALLEL_MIN_VARIANTS - 1)
    assert _python(code, "claimed", many) == str(GLIBC)
    assert _python(code, "claimed", few) == "None"       # a hook run on a few loops
    assert _python(code, "library", many) == "None"      # a program calling cli.run
    # the command's entry point is what claims the process
    monkeypatch.setattr(allocator, "_OWNED", [False])
    monkeypatch.setattr(cli, "main", lambda argv=None: 0)

    def leave(code):
        raise SystemExit(code)

    monkeypatch.setattr(cli, "leave", leave)
    with pytest.raises(SystemExit):
        cli.console()
    assert allocator._OWNED == [True]
