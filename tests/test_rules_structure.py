"""loop.hidden-cancellation.

References
----------
* Internal stability: the closed loop of C and P is internally stable iff
  1 + L has no zeros in the closed right half-plane AND there is no
  right-half-plane pole-zero cancellation between C and P (Doyle, Francis &
  Tannenbaum, Feedback Control Theory, 1992, section 3.3; from memory).
  Checked independently here: the eigenvalues (numpy.linalg.eigvals) of a
  hand-written closed-loop state-space realization of C and P keep the
  cancelled pole.
* ZOH maps a continuous pole p to z = exp(p h) (Åström & Wittenmark,
  Computer-Controlled Systems, 3rd ed., 1997).
"""

import math

import numpy as np
import pytest
from rule_contexts import (
    PLANT_LOCATION,
    analysis,
    block,
    context,
    controller_block,
    controller_entry,
    evaluation,
    factored,
    loop_spec,
    model,
)

from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.lti import MeasuredResponse
from ruleguard.rules.base import Severity
from ruleguard.rules.structure import hidden_cancellation


def ctx_for(c, g, h=None, variant="nominal", filters=()):
    spec = loop_spec(controller_entry(kind="transfer_function"),
                     sample_rate_hz=None if h is None else 1.0 / h)
    ctrl = controller_block(spec, None if h else c, c if h else None, "given" if h else None)
    plant = block("plant", "mechanics (zero_pole_gain)", "zero_pole_gain",
                  None if h else g, g if h else None, location=PLANT_LOCATION)
    ev = evaluation(variant, model(spec, ctrl, plant, filters), analysis())
    return spec, context(spec, [ev])


def test_unstable_plant_pole_cancelled_by_controller_zero():
    k = 5.0
    c = factored([1.0], [-10.0], k)  # k (s - 1)/(s + 10)
    g = factored([], [1.0], 1.0)  # 1/(s - 1)
    spec, ctx = ctx_for(c, g)
    # Independent check: closed loop of G (x' = x + u, y = x) and C (k (1 - 11/(s + 10)):
    # xc' = -10 xc + e, u = k (e - 11 xc)) with e = -y keeps the eigenvalue +1.
    a = np.array([[1.0 - k, -11.0 * k], [-1.0, -10.0]])
    eig = np.linalg.eigvals(a)
    assert np.max(eig.real) == pytest.approx(1.0)
    (v,) = hidden_cancellation(ctx, {"tolerance": 1e-6})
    assert "unstable plant pole" in v.message
    assert v.location == spec.controller.location and v.related == (PLANT_LOCATION,)
    assert v.measured == pytest.approx(0.0) and v.limit == 1e-6
    assert v.frequency_hz == pytest.approx(1.0 / (2 * math.pi))


def test_integrator_cancelled_by_washout_is_marginal():
    spec, ctx = ctx_for(factored([0.0], [-1.0], 1.0), factored([], [0.0], 3.0))
    (v,) = hidden_cancellation(ctx, {"tolerance": 1e-6})
    assert "marginal plant pole" in v.message


def test_controller_integrator_cancelled_by_plant_zero_at_origin():
    # PI (s + 10)/s on the plant s/(s + 2): r -> u = C/(1 + L) keeps the pole at 0
    spec, ctx = ctx_for(factored([-10.0], [0.0], 1.0), factored([0.0], [-2.0], 1.0))
    (v,) = hidden_cancellation(ctx, {"tolerance": 1e-6})
    assert "pole of velocity" in v.message and v.location == spec.controller.location
    assert v.related == (PLANT_LOCATION,)


def test_tolerance_is_relative():
    g = factored([], [100.0], 1.0)
    near = factored([100.0 * (1 + 1e-8)], [-1000.0], 1.0)
    far = factored([100.0 * (1 + 1e-3)], [-1000.0], 1.0)
    assert len(list(hidden_cancellation(ctx_for(near, g)[1], {"tolerance": 1e-6}))) == 1
    assert list(hidden_cancellation(ctx_for(far, g)[1], {"tolerance": 1e-6})) == []
    # stable cancellations are fine (a notch on a damped mode)
    stable = factored([-3.0 + 40j, -3.0 - 40j], [-500.0, -500.0], 1.0)
    assert list(hidden_cancellation(ctx_for(stable, factored([], [-3 + 40j, -3 - 40j], 1.0))[1],
                                    {"tolerance": 1e-6})) == []


def test_sampled_cancellation_of_zoh_pole():
    h = 1e-3
    from ruleguard.models.discretize import zoh_equivalent

    g = zoh_equivalent(factored([], [1.0], 1.0), h)
    assert np.max(np.abs(g.poles)) == pytest.approx(math.exp(h), rel=1e-12)  # z = e^{p h}
    c = factored([math.exp(h)], [0.5], 1.0, h=h)
    (v,) = hidden_cancellation(ctx_for(c, g, h=h)[1], {"tolerance": 1e-6})
    assert "unstable plant pole" in v.message


def test_measured_plant_is_a_note():
    spec = loop_spec(controller_entry(kind="transfer_function"))
    ctrl = block("controller", "velocity", "transfer_function", factored([1.0], [-10.0], 1.0),
                 location=spec.controller.location)
    plant = block("plant", "mechanics (measured_response)", "measured_response",
                  location=PLANT_LOCATION)
    w = np.logspace(0, 3, 20)
    meas = MeasuredResponse(w, np.zeros_like(w), np.zeros_like(w))
    m = model(spec, ctrl, plant, factors=(meas,))
    assert isinstance(m.open_loop, OpenLoop)
    (n,) = hidden_cancellation(context(spec, [evaluation("nominal", m, analysis())]), {})
    assert n.severity is Severity.NOTE and n.location == PLANT_LOCATION


def test_one_zero_cancels_one_pole_of_a_double_integrator():
    # plant 1/s^2, controller zero at s = 0: one integrator is hidden, the other stays in L
    spec, ctx = ctx_for(factored([0.0, -5.0], [-50.0, -60.0], 1.0), factored([], [0.0, 0.0], 1.0))
    assert len(list(hidden_cancellation(ctx, {"tolerance": 1e-6}))) == 1


def test_sampled_loop_with_plant_known_by_response_compares_s_designs():
    # the assembler keeps a plant path it cannot discretize exactly (a hold factor times the
    # continuous response) out of the factored loop: plant.discrete is None; the s-plane
    # designs still show the cancelled unstable pole
    from ruleguard.models.discretize import HoldFactor

    h = 1e-3
    spec = loop_spec(controller_entry(kind="transfer_function"), sample_rate_hz=1000.0)
    c_s = factored([1.0], [-10.0], 5.0)
    from ruleguard.models.discretize import discretize_block

    ctrl = controller_block(spec, c_s, discretize_block(c_s, "tustin", h), "tustin")
    plant = block("plant", "mechanics (zero_pole_gain)", "zero_pole_gain",
                  factored([], [1.0], 1.0), None, "hold", PLANT_LOCATION)
    m = model(spec, ctrl, plant, factors=(HoldFactor(h),))
    (v,) = hidden_cancellation(context(spec, [evaluation("nominal", m, analysis())]),
                               {"tolerance": 1e-6})
    assert "unstable plant pole at s = 1" in v.message
