"""Variant families: corner order, Latin-hypercube stratification, coverage.

References: the order of itertools.product as FORMATS.md section 2 specifies
it, the Latin-hypercube property of McKay, Beckman & Conover (Technometrics
21(2), 1979: each parameter's range split into N equal strata, exactly one
sample in each), and the documented draw order re-implemented here with
numpy.random.default_rng.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from model_builders import controller, loop, plant, project, vary

from ruleguard.errors import InputError
from ruleguard.load.expressions import parse_expression
from ruleguard.load.spec import VariantPolicy
from ruleguard.location import Location
from ruleguard.models.families import Variant, latin_hypercube, loop_variants

CTRL = controller("pid", kp=1.0, ki=1.0)


def two_entry_project(policy=None, extra_loops=()):
    motor = plant("motor", "first_order_dead_time", gain=2.0, time_constant_s=0.1,
                  varied=[vary("gain", 1.0, 3.0), vary("time_constant_s", 0.05, 0.2, "log")])
    sense = plant("sense", "transfer_function", parameters={"tau": 1e-3},
                  numerator=[1.0], denominator=[parse_expression(
                      "tau", Location("models/plants.toml", 9, 1, "plants.sense.denominator")),
                      1.0], varied=[vary("tau", 5e-4, 2e-3)])
    mech = plant("mech", "integrator_dead_time", gain=10.0, varied=[vary("gain", 8.0, 12.0)])
    loops = [loop("inner", "motor", CTRL, sensor="sense"),
             loop("outer", "mech", CTRL, inner="inner"), *extra_loops]
    return project([motor, sense, mech], loops, policy)


class TestCorners:
    def test_nominal_first_then_product_order(self):
        proj = two_entry_project()
        variants = loop_variants(proj, proj.loops[0])
        names = ["motor.gain", "motor.time_constant_s", "sense.tau"]  # sorted alphabetically
        assert variants[0] == Variant("nominal", {"motor.gain": 2.0,
                                                  "motor.time_constant_s": 0.1,
                                                  "sense.tau": 1e-3})
        ranges = [(1.0, 3.0), (0.05, 0.2), (5e-4, 2e-3)]
        # Reference: itertools.product([min, max], ...) over the sorted names.
        expected = list(itertools.product(*ranges))
        assert [v.id for v in variants[1:]] == [f"corner-{i}" for i in range(1, 9)]
        for v, values in zip(variants[1:], expected, strict=True):
            assert list(v.parameters) == names
            assert tuple(v.parameters.values()) == values
        assert all(v == lo for v, (lo, _) in zip(variants[1].parameters.values(), ranges,
                                                  strict=True))  # corner-1 is all minima

    def test_cascade_covers_inner_entries(self):
        proj = two_entry_project()
        variants = loop_variants(proj, proj.loops[1])
        assert list(variants[0].parameters) == ["mech.gain", "motor.gain",
                                                "motor.time_constant_s", "sense.tau"]
        assert len(variants) == 1 + 2**4

    def test_values_for_an_entry(self):
        v = Variant("corner-3", {"motor.gain": 1.0, "motor.time_constant_s": 0.2,
                                 "sense.tau": 5e-4})
        assert v.values_for("motor") == {"gain": 1.0, "time_constant_s": 0.2}
        assert v.values_for("sense") == {"tau": 5e-4}
        assert v.values_for("mech") == {}

    def test_no_varied_parameters_gives_only_the_nominal(self):
        proj = project([plant("p", "integrator_dead_time", gain=1.0)], [loop("a", "p", CTRL)])
        assert loop_variants(proj, proj.loops[0]) == (Variant("nominal", {}),)

    def test_more_than_ten_parameters_is_an_input_error(self):
        params = {f"k{i:02d}": 1.0 for i in range(11)}
        varied = [vary(n, 0.5, 1.5) for n in params]
        proj = project([plant("p", "integrator_dead_time", gain=1.0, parameters=params,
                              varied=varied)], [loop("a", "p", CTRL)])
        with pytest.raises(InputError) as info:
            loop_variants(proj, proj.loops[0])
        assert "2**11" in info.value.message

    def test_nominal_of_a_range_without_value_is_its_middle(self):
        proj = project([plant("p", "integrator_dead_time", gain=1.0,
                              varied=[vary("delay_s", 0.1, 0.3), vary("k", 1.0, 100.0, "log")])],
                       [loop("a", "p", CTRL)])
        nominal = loop_variants(proj, proj.loops[0])[0]
        assert nominal.parameters["p.delay_s"] == pytest.approx(0.2)
        assert nominal.parameters["p.k"] == pytest.approx(10.0)  # geometric middle in log scale

    def test_bad_ranges(self):
        for bad in (vary("gain", 2.0, 1.0), vary("gain", -1.0, 1.0, "log")):
            proj = project([plant("p", "integrator_dead_time", gain=1.0, varied=[bad])],
                           [loop("a", "p", CTRL)])
            with pytest.raises(InputError):
                loop_variants(proj, proj.loops[0])


class TestLatinHypercube:
    def test_one_sample_per_stratum_in_every_parameter(self):
        proj = two_entry_project(VariantPolicy("samples", samples=50, seed=7))
        variants = loop_variants(proj, proj.loops[0])
        assert variants[0].id == "nominal"
        assert [v.id for v in variants[1:]] == [f"sample-{i}" for i in range(1, 51)]
        table = np.array([list(v.parameters.values()) for v in variants[1:]])
        # McKay et al. 1979: each parameter's range in N equal strata, one sample each
        # (in log space for scale = "log").
        lin = [(0, 1.0, 3.0, False), (1, 0.05, 0.2, True), (2, 5e-4, 2e-3, False)]
        for j, lo, hi, log in lin:
            col = table[:, j]
            assert np.all((col >= lo) & (col <= hi))
            t = (np.log(col / lo) / math.log(hi / lo)) if log else (col - lo) / (hi - lo)
            strata = np.floor(t * 50).astype(int)
            assert sorted(strata) == list(range(50))

    def test_documented_draw_order(self):
        # Re-implementation of the documented order: one default_rng(seed); per sorted
        # name u = rng.random(N) then perm = rng.permutation(N); t = (perm + u)/N.
        ranges = [vary("a", 1.0, 2.0), vary("b", 10.0, 1000.0, "log")]
        ours = latin_hypercube(ranges, 20, 123)
        rng = np.random.default_rng(123)
        cols = []
        for r in ranges:
            u = rng.random(20)
            perm = rng.permutation(20)
            t = (perm + u) / 20
            cols.append(r.min + t * (r.max - r.min) if r.scale == "linear"
                        else np.exp(np.log(r.min) + t * (np.log(r.max) - np.log(r.min))))
        np.testing.assert_allclose(ours, np.column_stack(cols), rtol=1e-14)

    def test_same_seed_same_samples_other_seed_others(self):
        a = loop_variants(two_entry_project(VariantPolicy("samples", 10, 1)),
                          two_entry_project().loops[0])
        b = loop_variants(two_entry_project(VariantPolicy("samples", 10, 1)),
                          two_entry_project().loops[0])
        c = loop_variants(two_entry_project(VariantPolicy("samples", 10, 2)),
                          two_entry_project().loops[0])
        assert a == b
        assert a[1:] != c[1:]

    def test_sample_mean_close_to_the_range_middle(self):
        # Derived: on [0, 1] the samples are (i + u_i)/N for i = 0..N-1, so their
        # mean is 1/2 + (mean(u) - 1/2)/N, within 1/(2N) of the middle whatever u is.
        table = latin_hypercube([vary("a", 0.0, 1.0)], 1000, 5)
        assert abs(table[:, 0].mean() - 0.5) <= 1 / 2000
