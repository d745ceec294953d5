"""Whole loops: blocks, plant, sensor, delays and cascades put together.

:func:`build_loop` turns one loop of the manifest and one variant into a
:class:`~ruleguard.analysis.loop.LoopModel`, whose ``open_loop`` is
``L = C F1 ... Fn G H (delays)`` for negative feedback (FORMATS.md section 1).

Continuous loop (no ``sample_rate_hz``)
    The product of the factored blocks with the transport delay exact in
    ``delay_s``: plant ``delay_s`` + sensor ``delay_s`` + the loop's
    ``delay_s``. An improper controller (a derivative without a filter) makes
    the loop not analysable (rule ``controller.derivative-filter``).

Discrete loop (``sample_rate_hz`` set, h = 1/rate)
    * Controller and filters designed in s are discretized by their method
      (:func:`ruleguard.models.discretize.discretize_block`): the
      controller's ``discretization``, which a filter's own
      ``discretization`` overrides. **Default when absent: ``"tustin"``**
      (the bilinear rule, common practice for firmware filters and PIDs).
      ``tustin_prewarp`` prewarps at the block's ``prewarp_hz``, else at its
      characteristic frequency (notch centre, low-pass cutoff, lead-lag
      sqrt(zero_hz pole_hz)); a PID or transfer function without
      ``prewarp_hz`` gets plain Tustin and is reported as ``"tustin"`` (the
      method used); so does a block whose prewarp frequency is not below the
      Nyquist frequency (with a note). Biquads and z transfer functions are used as given
      (``"given"``).
    * Plant x sensor x transport delay is replaced by its exact zero-order
      hold equivalent (:func:`ruleguard.models.discretize.zoh_equivalent`),
      total delay = plant ``delay_s`` + sensor ``delay_s`` +
      ``delay_samples``/``sample_rate_hz`` (+ the loop's ``delay_s`` if one is
      given).
    * A plant or sensor known only by its frequency response (measured data,
      or a closed inner loop at another rate) is seen through the hold:
      ``HoldFactor(h)`` times the continuous responses, the whole samples of
      the delay as poles at ``z = 0`` in the rational part and the fraction
      as an exact ``exp(-j w tau)`` factor. Aliasing is ignored and the
      notes say so.

Cascades (``inner = "name"``)
    The inner loop is built with the same variant and put in
    ``LoopModel.inner``. Its closed loop ``T = C F G / (1 + C F G H)``
    (reference to the inner plant's output, sensor not in the forward path)
    is in series with the outer plant:

    * inner rational without continuous delay (continuous, or discrete at
      any delay): ``T`` in factored form, poles = eigenvalues of the
      closed-loop state matrix of a realization of the inner L (negative
      unity feedback ``A - B C/(1 + D)``), zeros = the zeros of ``C F G``
      and the poles of L that are not poles of ``C F G`` (the sensor's);
    * inner continuous with a delay, or with measured data: a
      :class:`~ruleguard.models.factors.ClosedLoopResponse` evaluating ``T``
      exactly;
    * same domain and rate: ``T`` is composed with the outer path in z (a
      sampled ``T`` known only by its response multiplies the exact ZOH
      equivalent of the outer plant); a continuous rational ``T`` in a
      discrete outer loop is part of the continuous path whose exact ZOH
      equivalent is taken;
    * different rates (inner faster): the outer loop sees
      ``T(exp(j w h_inner))`` as a response factor behind the outer hold
      (valid below the inner Nyquist frequency; aliasing ignored, said in
      the notes).

    A discrete ``T`` in series with the ZOH equivalent of the outer plant
    treats the inner plant's output as held between samples; the notes say
    so. The pipeline checks the inner loop's stability before using the
    outer result.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ruleguard.analysis.loop import BlockModel, LoopModel
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.errors import InputError, LoopNotAnalysable
from ruleguard.frozen import record
from ruleguard.load.spec import LoopSpec, PlantEntry, Project
from ruleguard.location import Location
from ruleguard.models.blocks import DesignedBlock, controller_block, filter_block
from ruleguard.models.factors import BlockResponse, ClosedLoopResponse
from ruleguard.models.families import Variant, find_loop
from ruleguard.models.lti import Factored, MeasuredResponse, factored_to_state_space
from ruleguard.models.plants import plant_delay_s, plant_model

#: Discretization of controller blocks when ``discretization`` is absent.
DEFAULT_DISCRETIZATION = "tustin"

#: Methods a controller or filter may name in ``discretization``.
DISCRETIZATION_METHODS = ("tustin", "tustin_prewarp", "backward_euler", "forward_euler")

#: Two sample periods are the same rate when they agree to this relative tolerance.
SAME_RATE_RTOL = 1e-12

#: A pole of C F G and a pole of L are the same pole (cancelled in T) within
#: this relative distance. They are copies of the same floating-point numbers
#: in practice (the ZOH maps each continuous pole p to exp(p h) directly).
CANCEL_RTOL = 1e-12

ALIASING_NOTE = "aliasing is ignored"


@record(eq=False)
class _Built:
    """A built loop with its forward path (reference to the plant's output)."""

    model: LoopModel
    forward: OpenLoop


def build_loop(project: Project, spec: LoopSpec, variant: Variant) -> LoopModel:
    """Build one variant of one loop (see the module documentation).

    Parameters
    ----------
    project:
        The loaded project (plant registry and every loop, for cascades).
    spec:
        The loop to build.
    variant:
        Its variant (from :func:`ruleguard.models.families.loop_variants`).

    Raises
    ------
    LoopNotAnalysable
        An improper controller in a continuous loop, an ill-posed cascade.
    InputError
        A model that cannot be built from the inputs (located).
    """
    return _build(project, spec, variant, (), need_forward=False).model


# ------------------------------------------------------------------ loops
def _build(project: Project, spec: LoopSpec, variant: Variant, chain: tuple[str, ...], *,
           need_forward: bool) -> _Built:
    """Build a loop; its forward path (for a cascade) only when ``need_forward``."""
    if spec.name in chain:
        raise InputError.at(spec.field_locations.get("inner", spec.location),
                            f"cascade cycle: {' -> '.join((*chain, spec.name))}")
    spec = at_operating_point(spec, variant)
    rate = spec.sample_rate_hz
    h = None if rate is None else 1.0 / float(rate)
    if h is not None and not (math.isfinite(h) and h > 0):
        raise InputError.at(spec.field_locations.get("sample_rate_hz", spec.location),
                            "sample_rate_hz must be positive")
    if h is None and spec.delay_samples:
        raise InputError.at(spec.field_locations.get("delay_samples", spec.location),
                            "delay_samples needs sample_rate_hz (a continuous loop uses delay_s)")
    notes: list[str] = []

    block_models, run_blocks = _controller_side(spec, h, notes)
    controller_path = run_blocks[0]
    for blk in run_blocks[1:]:
        controller_path = controller_path * blk

    # Plant, sensor, inner loop ---------------------------------------------
    plant_entry = _entry(project, spec.plant, spec, "plant")
    plant, plant_delay = _plant(plant_entry, variant)
    sensor_entry = _entry(project, spec.sensor, spec, "sensor") if spec.sensor else None
    sensor, sensor_delay = (None, 0.0) if sensor_entry is None else _plant(sensor_entry, variant)

    inner_model: LoopModel | None = None
    inner_t: Factored | ClosedLoopResponse | None = None
    if spec.inner:
        inner_spec = find_loop(project, spec.inner, spec)
        try:
            inner = _build(project, inner_spec, variant, (*chain, spec.name),
                           need_forward=True)
        except LoopNotAnalysable as exc:
            raise LoopNotAnalysable(f"inner loop {inner_spec.name!r}: {exc.reason}",
                                    exc.rule, exc.location) from None
        inner_model = inner.model
        inner_t = inner_closed_loop(inner.forward, inner.model.open_loop,
                                    spec.field_locations.get("inner", spec.location))
        notes.extend(_cascade_notes(inner_model, inner_t, h))

    extra_delay = float(spec.delay_s or 0.0)
    delay_samples = float(spec.delay_samples or 0.0)
    if h is None:
        total_delay = plant_delay + sensor_delay + extra_delay
        loop = _continuous_path(controller_path, inner_t, plant, sensor,
                                plant_delay + sensor_delay + extra_delay)
        forward = (loop if not need_forward or (sensor is None and sensor_delay == 0.0) else
                   _continuous_path(controller_path, inner_t, plant, None,
                                    plant_delay + extra_delay))
        plant_method = None
        plant_discrete = None
    else:
        total_delay = plant_delay + sensor_delay + delay_samples * h + extra_delay
        loop, plant_discrete, plant_method = _discrete_path(
            controller_path, inner_t, plant, sensor, total_delay, h, notes)
        if not need_forward or (sensor is None and sensor_delay == 0.0):
            forward = loop
        else:
            forward, _, _ = _discrete_path(controller_path, inner_t, plant, None,
                                           plant_delay + delay_samples * h + extra_delay, h, [])
    notes.extend(_boundary_notes(loop))

    plant_block = _plant_block(plant_entry, plant, "plant", plant_discrete, plant_method)
    sensor_block = (None if sensor_entry is None else
                    _plant_block(sensor_entry, sensor, "sensor", None, plant_method))
    if h is None:
        discretization: dict = {}
    else:
        discretization = {
            "controller": block_models[0].method,
            "filters": [b.method for b in block_models[1:]],
            "plant": plant_method,
        }
    for factor in loop.factors:  # caveats of measured data (e.g. coarse resonances)
        notes.extend(getattr(factor, "notes", ()))
    model = LoopModel(
        name=spec.name,
        sample_rate_hz=None if rate is None else float(rate),
        open_loop=loop,
        controller=block_models[0],
        filters=tuple(block_models[1:]),
        plant=plant_block,
        sensor=sensor_block,
        controller_path=controller_path,
        total_delay_s=float(total_delay),
        discretization=discretization,
        notes=tuple(dict.fromkeys(notes)),
        inner=inner_model,
    )
    return _Built(model, forward)


def at_operating_point(spec: LoopSpec, variant: Variant) -> LoopSpec:
    """The loop with its controller's scheduled fields set to the variant's operating point.

    The controller then stands at the point's row (or breakpoint element):
    its ``location`` and the scheduled fields' locations are those of the
    point. Loops without a schedule are returned unchanged.
    """
    point = getattr(variant, "operating_point", None)
    controller = spec.controller
    if point is None or controller.schedule is None:
        return spec
    fields = {**controller.fields, **point.fields}
    locations = {**controller.field_locations, **point.field_locations}
    return dataclasses.replace(spec, controller=dataclasses.replace(
        controller, fields=fields, field_locations=locations, location=point.location))


#: Controller sides built already in this process: ``(id(controller), h)`` ->
#: ``(controller, block models, run blocks, notes)``. The variants of a loop
#: (all but the operating points of a schedule) share their controller entry,
#: whose blocks and discretization do not depend on the variant. The entry is
#: kept in the value, so its ``id`` is not reused while the key exists.
_CONTROLLER_SIDES: dict = {}
_CONTROLLER_SIDES_MAX = 256


def _controller_side(spec: LoopSpec, h: float | None, notes: list[str]
                     ) -> tuple[list[BlockModel], list[Factored]]:
    """The controller and its filters as designed and as run (in the loop's domain).

    Remembered per controller entry and sample period (:data:`_CONTROLLER_SIDES`):
    the same entry gives the same blocks (the same objects) and notes.
    """
    key = (id(spec.controller), h)
    done = _CONTROLLER_SIDES.get(key)
    if done is not None and done[0] is spec.controller:
        notes.extend(done[3])
        return list(done[1]), list(done[2])
    first = len(notes)
    block_models, run_blocks = _build_controller_side(spec, h, notes)
    if len(_CONTROLLER_SIDES) >= _CONTROLLER_SIDES_MAX:
        _CONTROLLER_SIDES.clear()
    _CONTROLLER_SIDES[key] = (spec.controller, tuple(block_models), tuple(run_blocks),
                              tuple(notes[first:]))
    return block_models, run_blocks


def _build_controller_side(spec: LoopSpec, h: float | None, notes: list[str]
                           ) -> tuple[list[BlockModel], list[Factored]]:
    designed = [controller_block(spec.controller, h)]
    designed += [filter_block(f, h) for f in spec.controller.filters]
    if h is None:
        for block in designed:
            _require_proper(block, spec)
    default_method = _method(spec.controller.fields.get("discretization"),
                             spec.controller.field_locations.get("discretization",
                                                                 spec.controller.location))
    if h is not None and spec.controller.fields.get("discretization") is None and any(
        not b.given_in_z for b in designed
    ):
        notes.append(f"no discretization given: {DEFAULT_DISCRETIZATION} (the default) used")
    block_models: list[BlockModel] = []
    run_blocks: list[Factored] = []
    for i, block in enumerate(designed):
        if i == 0:
            role, label, own = "controller", f"{spec.controller.path} ({block.kind})", None
        else:
            entry = spec.controller.filters[i - 1]
            role = "filter"
            label = f"{spec.controller.path}.filters.{entry.index} ({block.kind})"
            own = entry.fields.get("discretization")
            if own is not None:
                own = _method(own, entry.field_locations.get("discretization", entry.location))
        method_asked = own or default_method
        run, method = _run_block(block, method_asked, h)
        if method_asked == "tustin_prewarp" and method == "tustin" and block.prewarp_hz:
            notes.append(f"{label}: prewarp frequency {block.prewarp_hz:g} Hz is not below the "
                         "Nyquist frequency; plain Tustin used")
        if method == "forward_euler" and not run.is_proper:
            notes.append(f"{label}: forward Euler leaves the unfiltered derivative non-causal")
        run_blocks.append(run)
        chars = dict(block.characteristic_hz)
        if method == "tustin_prewarp":
            chars["prewarp_hz"] = float(block.prewarp_hz)
        block_models.append(BlockModel(
            role=role, label=label, kind=block.kind,
            continuous=None if block.given_in_z else block.model,
            discrete=run if h is not None else None,
            method=method, characteristic_hz=chars,
            location=block.location,
        ))
    return block_models, run_blocks


def _entry(project: Project, name: str, spec: LoopSpec, key: str) -> PlantEntry:
    entry = project.plants.get(name)
    if entry is None:
        raise InputError.at(spec.field_locations.get(key, spec.location),
                            f"no plant registry entry named {name!r}")
    return entry


def _plant(entry: PlantEntry, variant: Variant) -> tuple[Factored | MeasuredResponse, float]:
    values = variant.values_for(entry.name)
    model = plant_model(entry, values)
    if isinstance(model, Factored):
        return model, model.delay_s
    return model, plant_delay_s(entry, values)


def _require_proper(block: DesignedBlock, spec: LoopSpec) -> None:
    if block.is_proper:
        return
    fields = spec.controller.field_locations
    if block.unfiltered_derivative:
        location = fields.get("kd", block.location)
        reason = ("the derivative term has no filter (derivative_filter_hz): the controller is "
                  "improper and a continuous loop with it cannot be analysed")
    else:
        location = block.location
        reason = (f"the {block.kind} block has more zeros than poles (improper): a continuous "
                  "loop with it cannot be analysed")
    raise LoopNotAnalysable(reason, "controller.derivative-filter", location)


def _method(value, location: Location) -> str:
    if value is None:
        return DEFAULT_DISCRETIZATION
    if value not in DISCRETIZATION_METHODS:
        raise InputError.at(location, f"discretization must be one of "
                                      f"{', '.join(DISCRETIZATION_METHODS)}; got {value!r}")
    return value


def _run_block(block: DesignedBlock, method: str, h: float | None) -> tuple[Factored, str | None]:
    """The block as the loop runs it, and the method actually used."""
    if h is None:
        return block.model, None
    if block.given_in_z:
        return block.model, "given"
    from ruleguard.models.discretize import discretize_block  # lazy: scipy-free import path

    prewarp = None
    used = method
    if method == "tustin_prewarp":
        if block.prewarp_hz is None or not 2.0 * math.pi * block.prewarp_hz < math.pi / h:
            # No prewarping frequency (a PID), or one at or above the Nyquist
            # frequency (a filter the rule filter.below-nyquist reports): the
            # bilinear rule cannot match there, plain Tustin is what is used.
            used = "tustin"
        else:
            prewarp = 2.0 * math.pi * block.prewarp_hz
    return discretize_block(block.model, used, h, prewarp), used


# ------------------------------------------------------------ plant paths
def _continuous_path(controller_path: Factored, inner_t, plant, sensor, delay_s: float) -> OpenLoop:
    rational = controller_path
    factors: list = []
    for piece in (inner_t, plant, sensor):
        if piece is None:
            continue
        if isinstance(piece, Factored) and not piece.is_discrete:
            rational = rational * piece.without_delay()
        elif isinstance(piece, Factored):
            factors.append(BlockResponse(piece))
        else:
            factors.append(piece)
    rational = Factored(rational.zeros, rational.poles, rational.gain, delay_s, None)
    return OpenLoop(rational, tuple(factors))


def _discrete_path(controller_path: Factored, inner_t, plant, sensor, delay_s: float, h: float,
                   notes: list[str]) -> tuple[OpenLoop, Factored | None, str]:
    """The open loop of a sampled loop, the plant-path ZOH block, and the plant method."""
    from ruleguard.models.discretize import DelayFactor, HoldFactor, split_delay, zoh_equivalent

    rational = controller_path
    continuous: list[Factored] = []
    same_rate: list = []  # z-domain responses at this rate: multiplied as they are
    responses: list = []  # continuous-time responses: seen through the hold
    for piece in (inner_t, plant, sensor):
        if piece is None:
            continue
        if isinstance(piece, Factored) and piece.is_discrete and _same_rate(piece.sample_time_s, h):
            rational = rational * piece
        elif isinstance(piece, Factored) and not piece.is_discrete:
            continuous.append(piece.without_delay())
        elif isinstance(piece, Factored):
            responses.append(BlockResponse(piece))
        elif isinstance(piece, ClosedLoopResponse) and _same_rate(piece.loop.sample_time_s, h):
            same_rate.append(piece)
        else:
            responses.append(piece)
    if not responses:
        # the product of the pieces (one piece: itself, the numbers 1 * x would give)
        path = continuous[0] if len(continuous) == 1 else Factored.unity()
        if len(continuous) != 1:
            for piece in continuous:
                path = path * piece
        zoh = zoh_equivalent(path, h, delay_s)
        return OpenLoop(rational * zoh, tuple(same_rate)), zoh, "zoh"
    whole, fraction = split_delay(delay_s, h)
    if whole:
        rational = rational * Factored([], np.zeros(whole), 1.0, 0.0, h)
    factors: list = [HoldFactor(h)]
    if fraction:
        factors.append(DelayFactor(fraction * h))
    factors.extend(BlockResponse(piece) for piece in continuous)
    factors.extend(same_rate)
    factors.extend(responses)
    notes.append("the plant path is known by its frequency response: hold factor times the "
                 f"continuous response ({ALIASING_NOTE})")
    return OpenLoop(rational, tuple(factors)), None, "hold"


def _same_rate(h1: float | None, h2: float | None) -> bool:
    if h1 is None or h2 is None:
        return h1 is h2
    return abs(h1 - h2) <= SAME_RATE_RTOL * max(h1, h2)


def _plant_block(entry: PlantEntry, model, role: str, discrete: Factored | None,
                 method: str | None) -> BlockModel:
    measured = model if isinstance(model, MeasuredResponse) else None
    return BlockModel(
        role=role, label=f"{entry.name} ({entry.kind})", kind=entry.kind,
        continuous=model if isinstance(model, Factored) else None,
        discrete=discrete, method=method, characteristic_hz={},
        location=entry.location, measured=measured,
    )


def _boundary_notes(loop: OpenLoop) -> list[str]:
    notes = []
    for f in loop.factors:
        if isinstance(f, BlockResponse) and f.nonzero_boundary_poles():
            notes.append("a block seen through its frequency response has poles on the "
                         "stability boundary away from zero frequency; the contour is not "
                         "indented around them")
    return notes


# ---------------------------------------------------------------- cascades
def inner_closed_loop(forward: OpenLoop, loop: OpenLoop, location: Location
                      ) -> Factored | ClosedLoopResponse:
    """The closed inner loop ``T = forward / (1 + loop)`` for the outer loop.

    Factored (:func:`closed_loop_factored`) when both are rational without a
    continuous delay, else a :class:`ClosedLoopResponse`.
    """
    rational = (forward.is_rational and loop.is_rational and not forward.rational.delay_s
                and not loop.rational.delay_s)
    if rational and loop.rational.is_proper and forward.rational.is_proper:
        try:
            return closed_loop_factored(forward.rational, loop.rational)
        except ZeroDivisionError:
            raise LoopNotAnalysable("the inner loop is ill-posed (1 + L is zero at infinite "
                                    "frequency)", "stability.closed-loop", location) from None
        except ValueError:
            pass  # no factored form found: the exact response serves instead
    return ClosedLoopResponse(forward, loop)


def closed_loop_factored(forward: Factored, loop: Factored) -> Factored:
    """``T = forward / (1 + loop)`` in factored form.

    ``T = forward * S`` with ``S = 1/(1 + L)``: the zeros of ``S`` are the
    poles of ``L``; its poles are the closed-loop poles, the eigenvalues of
    ``A - B C / (1 + D)`` for a realization ``(A, B, C, D)`` of ``L`` (the
    series-of-sections realization of
    :func:`~ruleguard.models.lti.factored_to_state_space`, no polynomial is
    multiplied out); its gain is ``1/(1 + D)`` when ``L`` is biproper, else 1.
    The poles of ``forward`` are poles of ``L`` too (``L = forward H``, or
    ``C F ZOH(G H)`` against ``C F ZOH(G)``, whose poles are the same
    ``exp(p h)``): each cancels with its copy among the zeros of ``S``; what
    remains are the sensor's poles, which are zeros of ``T``.

    Both blocks must be in the same domain, rational, proper, without a
    continuous delay.

    Raises
    ------
    ZeroDivisionError
        When ``1 + D = 0`` (an ill-posed loop).

    References
    ----------
    Franklin, Powell & Emami-Naeini, "Feedback Control of Dynamic Systems",
    any edition, chapter on state-space design (closed-loop state matrix of
    output feedback; common practice).
    """
    if forward.sample_time_s != loop.sample_time_s:
        raise ValueError("forward path and loop must be in the same domain")
    ss = factored_to_state_space(loop.without_delay())
    d = float(ss.d[0, 0])
    if 1.0 + d == 0.0:
        raise ZeroDivisionError("1 + D = 0")
    if ss.order:
        a_cl = ss.a - (ss.b @ ss.c) / (1.0 + d)
        closed_poles = np.linalg.eigvals(a_cl)
    else:
        closed_poles = np.zeros(0, complex)
    s_gain = 1.0 / (1.0 + d) if loop.relative_degree == 0 else 1.0
    leftover = _remove_matching(list(loop.poles), forward.poles)
    return Factored(np.concatenate([forward.zeros, np.asarray(leftover, dtype=complex)]),
               closed_poles, forward.gain * s_gain, 0.0, loop.sample_time_s)


def _remove_matching(candidates: list[complex], remove: np.ndarray) -> list[complex]:
    """``candidates`` minus one copy of each value of ``remove`` (within CANCEL_RTOL)."""
    pool = list(candidates)
    for p in np.asarray(remove, dtype=complex):
        if not pool:
            break
        dist = np.abs(np.asarray(pool) - p)
        k = int(np.argmin(dist))
        if dist[k] <= CANCEL_RTOL * max(1.0, abs(p)):
            pool.pop(k)
        else:
            raise ValueError(f"pole {p} of the forward path is not a pole of the loop")
    return pool


def _cascade_notes(inner: LoopModel, inner_t, h: float | None) -> list[str]:
    h_inner = None if inner.sample_rate_hz is None else 1.0 / inner.sample_rate_hz
    notes = [f"cascade: closed inner loop {inner.name!r} in series with the plant"]
    if isinstance(inner_t, ClosedLoopResponse):
        notes.append(f"inner loop {inner.name!r} enters through its exact frequency response")
    if h is None and h_inner is not None:
        notes.append(f"inner loop {inner.name!r} is sampled and this loop is continuous: its "
                     f"closed loop enters through T(exp(j w h_inner)) ({ALIASING_NOTE})")
    elif h is not None and h_inner is not None:
        if _same_rate(h, h_inner) and isinstance(inner_t, ClosedLoopResponse):
            notes.append(f"inner loop {inner.name!r} at the same rate: its closed loop "
                         "T(exp(j w h)) multiplies the ZOH equivalent of this loop's plant; "
                         "the inner plant's output is taken as held between samples")
        elif _same_rate(h, h_inner):
            notes.append(f"inner loop {inner.name!r} at the same rate: composed exactly in z; "
                         "the inner plant's output is taken as held between samples")
        else:
            notes.append(f"inner loop {inner.name!r} at {inner.sample_rate_hz:g} Hz enters "
                         "through T(exp(j w h_inner)) behind this loop's hold, valid below the "
                         f"inner Nyquist frequency ({ALIASING_NOTE})")
            if h_inner > h:
                notes.append(f"inner loop {inner.name!r} runs slower than this loop: the "
                             "frequency-response composition does not hold above its Nyquist "
                             "frequency")
    return notes
