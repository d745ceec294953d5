"""Parts equal in every variant are one object (ruleguard.workunits.shared_blocks).

The outside reference is the unshared build itself: every shared outcome must
pickle to the same bytes as the outcome built and analysed on its own (the
same values, and the same links among its parts), while 10,000 variants hold
one controller side instead of 10,000.
"""

import io
import pickle
import shutil
from pathlib import Path

import pytest

from ruleguard.load.project import load_project
from ruleguard.models.families import loop_variants
from ruleguard.workunits import (
    ROUNDED,
    analyse_chunk,
    analyse_variant,
    shared_blocks,
    split_variants,
)

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"


@pytest.fixture(scope="module")
def velocity(tmp_path_factory):
    """(project, tilt.velocity spec, its variants): the demo with 6 sampled variants."""
    folder = tmp_path_factory.mktemp("share") / "demo"
    shutil.copytree(DEMO, folder, ignore=shutil.ignore_patterns(".ruleguard-cache"))
    manifest = folder / "ruleguard.toml"
    text = manifest.read_text()
    sampled = "variants = { samples = 6, seed = 5 }"
    manifest.write_text(text.replace('variants = "corners"', sampled))
    project = load_project(manifest)
    spec = next(s for s in project.loops if s.name == "tilt.velocity")
    return project, spec, loop_variants(project, spec)


def _bytes(outcome) -> bytes:
    return pickle.dumps(outcome, protocol=pickle.HIGHEST_PROTOCOL)


def _values(outcome) -> bytes:
    """The pickled values alone (no memo: which equal strings are one object is left out)."""
    out = io.BytesIO()
    pickler = pickle.Pickler(out, protocol=pickle.HIGHEST_PROTOCOL)
    pickler.fast = True
    pickler.dump(outcome)
    return out.getvalue()


def test_chunk_shares_the_controller_side_and_keeps_every_value(velocity):
    project, spec, variants = velocity
    chunk = split_variants(spec.name, variants, len(variants), prepare_rounding=True)[0]
    shared = analyse_chunk(project, chunk)
    alone = [analyse_variant(project, spec, v, True) for v in variants]
    # values, not bytes: the rounding of an equal block is remembered per process
    # (models.quantize), so which equal strings are one object differs
    assert [_values(a) for a in shared] == [_values(b) for b in alone]
    first, second = shared[1].model, shared[2].model
    assert first.controller is second.controller and first.filters is second.filters
    assert first.controller_path is second.controller_path
    assert first.inner.controller is second.inner.controller
    assert first.plant is not second.plant  # the plant is what the variants vary
    q_first, report_first, _ = shared[1].prepared[ROUNDED]
    q_second, report_second, _ = shared[2].prepared[ROUNDED]
    assert q_first.controller is q_second.controller and report_first is report_second
    # the rounded model keeps its model's plant, sensor and inner loop
    assert q_second.plant is second.plant and q_second.sensor is second.sensor
    assert q_second.inner is second.inner


def test_parent_pool_joins_chunks(velocity):
    project, spec, variants = velocity
    chunks = split_variants(spec.name, variants, 3, prepare_rounding=True)
    # as the parent receives them: pickled by the workers, one chunk at a time
    received = [pickle.loads(pickle.dumps(analyse_chunk(project, c))) for c in chunks]
    assert received[0][0].model.controller is not received[1][0].model.controller
    pool: dict = {}
    joined = [o for found in received for o in shared_blocks(found, pool)]
    assert [_values(o) for o in joined] == [_values(o) for found in received for o in found]
    assert len({id(o.model.controller) for o in joined}) == 1
    assert len({id(o.prepared[ROUNDED][1]) for o in joined}) == 1
    assert len({id(o.model.plant) for o in joined}) == len(joined)


def test_unequal_parts_stay_apart():
    from ruleguard.workunits import _shared

    pool: dict = {}
    a, b, c = [1.0, 2.0], [1.0, 2.0], [1.0, 2.5]
    assert _shared("x", a, pool, {}) is a
    assert _shared("x", b, pool, {}) is a  # equal content: the first one met
    assert _shared("x", c, pool, {}) is c
    assert _shared("y", list(b), pool, {}) is not a  # another kind of part: another pool
