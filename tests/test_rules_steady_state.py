"""steady-state.type.

References
----------
* System type: the number of poles of L at s = 0 (z = 1); by the final-value
  theorem type 0 leaves a step error 1/(1 + L(0)), type 1 none (Franklin,
  Powell & Emami-Naeini, Feedback Control of Dynamic Systems; from memory).
* Tustin maps s = 0 to z = (c + 0)/(c - 0) = 1, so a discretized integrator
  stays an integrator (bilinear map, Åström & Wittenmark 1997).
"""


import numpy as np
from rule_contexts import (
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
from ruleguard.models.discretize import discretize_block
from ruleguard.models.lti import MeasuredResponse
from ruleguard.rules.steady_state import loop_type, steady_state_type


def pi_loop(spec, plant_factored, h=None):
    kp, ki = 2.0, 50.0
    c = factored([-ki / kp], [0.0], kp)  # kp + ki/s = kp (s + ki/kp)/s
    d = discretize_block(c, "tustin", h) if h else None
    ctrl = controller_block(spec, c, d, "tustin" if h else None)
    pd = None
    if h:
        from ruleguard.models.discretize import zoh_equivalent

        pd = zoh_equivalent(plant_factored, h)
    plant = block("plant", "mechanics", "zero_pole_gain", plant_factored, pd)
    return evaluation("nominal", model(spec, ctrl, plant), analysis())


def test_pi_gives_type_one_continuous_and_sampled():
    spec = loop_spec(controller_entry(fields={"kp": 2.0, "ki": 50.0}))
    ev = pi_loop(spec, factored([], [-1.0], 1.0))
    assert loop_type(ev.model.open_loop) == 1
    assert list(steady_state_type(context(spec, [ev]), {"min_integrators": 1})) == []
    (v,) = steady_state_type(context(spec, [ev]), {"min_integrators": 2})
    assert v.measured == 1.0 and v.limit == 2.0
    assert v.location == spec.controller.field_locations["ki"]
    dspec = loop_spec(controller_entry(fields={"kp": 2.0, "ki": 50.0}), sample_rate_hz=1000.0)
    dev = pi_loop(dspec, factored([], [-1.0], 1.0), h=1e-3)
    assert np.min(np.abs(dev.model.controller.discrete.poles - 1.0)) < 1e-15  # Tustin: z = 1
    assert loop_type(dev.model.open_loop) == 1


def test_zero_at_origin_cancels_plant_integrator():
    # washout s/(s + 1) on the plant 1/s: the integrator does not reach L (type 0)
    spec = loop_spec(controller_entry(kind="transfer_function", fields={}))
    c = factored([0.0], [-1.0], 1.0)
    ctrl = block("controller", "velocity (transfer_function)", "transfer_function", c)
    plant = block("plant", "mechanics", "zero_pole_gain", factored([], [0.0], 3.0))
    ev = evaluation("nominal", model(spec, ctrl, plant), analysis())
    assert loop_type(ev.model.open_loop) == 0
    (v,) = steady_state_type(context(spec, [ev]), {"min_integrators": 1})
    assert v.location == spec.controller.location  # no ki field: the controller table


def test_measured_factor_integrators_count():
    w = np.logspace(0, 3, 50)
    meas = MeasuredResponse(w, -20 * np.log10(w), np.full_like(w, -90.0), integrators=1)
    ol = OpenLoop(factored([], [], 2.0), (meas,))
    assert loop_type(ol) == 1


def test_default_checks_nothing():
    spec = loop_spec(controller_entry(kind="transfer_function"))
    c = factored([], [-1.0], 1.0)
    ev = evaluation("nominal", model(spec, block("controller", "c", "tf", c),
                                     block("plant", "p", "factored", factored([], [-2.0], 1.0))),
                    analysis())
    assert list(steady_state_type(context(spec, [ev]), {"min_integrators": 0})) == []
