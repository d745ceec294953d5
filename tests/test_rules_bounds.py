"""config.bounds: controller fields within the manifest's declared ranges.

The limits are the manifest's own (no outside threshold); the checks are the
inclusive interval comparisons, the located field, and the note for a name
the controller does not set.
"""

import math

import pytest
from rule_contexts import context, controller_entry, loop_spec

from ruleguard.rules.base import Severity
from ruleguard.rules.bounds import config_bounds


def bounded(bounds, fields=None, filters=()):
    if fields is None:
        fields = {"kp": 2.1, "ki": 6200.0, "derivative_filter_hz": 4e3}
    spec = loop_spec(controller_entry(fields=fields, filters=filters), bounds=bounds)
    return spec, context(spec, [])  # needs no analysis: runs on unanalysed loops too


def test_bounds_pass_inclusive_ends():
    spec, ctx = bounded({"kp": (2.1, 4.0), "ki": (0.0, 6200.0)})
    assert list(config_bounds(ctx, {})) == []


def test_bounds_fail_points_at_field_with_bounds_related():
    spec, ctx = bounded({"kp": (2.5, 4.0), "derivative_filter_hz": (0.0, 3000.0)})
    out = {v.key_path.rsplit(".", 1)[-1]: v for v in config_bounds(ctx, {})}
    kp = out["kp"]
    assert kp.measured == 2.1 and kp.limit == 2.5 and "below the minimum" in kp.message
    assert kp.location == spec.controller.field_locations["kp"]
    assert kp.related == (spec.field_locations["bounds.kp"],)
    f = out["derivative_filter_hz"]
    assert f.limit == 3000.0 and f.unit == "Hz" and "above the maximum" in f.message


def test_bounds_reach_filter_fields_and_note_unknown_names():
    spec, ctx = bounded(
        {"filters.0.center_hz": (100.0, 1000.0), "kd": (0.0, 1.0)},
        filters=[("notch", {"center_hz": 1800.0, "width_hz": 300.0})],
    )
    out = list(config_bounds(ctx, {}))
    notes = [v for v in out if v.severity is Severity.NOTE]
    fails = [v for v in out if v.severity is None]
    assert len(notes) == 1 and "`kd`" in notes[0].message
    (f,) = fails
    assert f.measured == 1800.0
    assert f.location == spec.controller.filters[0].field_locations["center_hz"]
    assert math.isfinite(f.limit) and f.limit == pytest.approx(1000.0)
