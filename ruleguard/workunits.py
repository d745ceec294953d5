"""The unit of parallel work: one chunk of one loop's variants, built and analysed.

A :class:`VariantChunk` is frozen, picklable data (the loop's name, a run of
its variants, the time budget's deadline); :func:`analyse_chunk` is a pure
function (but for the clock) from the project and a chunk to a tuple of
:class:`VariantOutcome`, one per variant in order, ending early at the first
variant that stops the loop (a numerical failure, an unstable inner loop, a
loop that cannot be analysed, the deadline). Every executor
(:mod:`ruleguard.executors`) runs this same function, in this process, in a
local process pool or on a cluster, and the pipeline reads the outcomes in
variant order, so the report does not depend on where or in how many pieces
the work ran.

Nothing here keeps state between calls: the result of a variant depends only
on the project, the loop and the variant.
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import field

from ruleguard.errors import InputError, LoopNotAnalysable, NumericalWarning
from ruleguard.frozen import record
from ruleguard.location import Location
from ruleguard.timings import stage

#: Most variants in one chunk: large enough that 10,000 variants make a
#: hundred tasks rather than 10,000 (the parts shared by the variants are
#: pickled once per chunk), small enough that results stream back and both
#: workers stay busy to the end (the last chunk of one worker, some 1-2 s,
#: is the time the other may wait).
MAX_CHUNK_VARIANTS = 100

#: Chunks per worker a loop is cut into (when that keeps them under the maximum).
CHUNKS_PER_WORKER = 4


@record
class VariantChunk:
    """A run of consecutive variants of one loop.

    Attributes
    ----------
    loop:
        The loop's name (``LoopSpec.name``).
    start:
        Position of the first variant in the loop's variant list (0 = nominal).
    variants:
        The variants (:class:`ruleguard.models.families.Variant`), in order.
    deadline_epoch_s:
        ``time.time()`` after which no further variant is started (``None``:
        no budget). Wall-clock seconds since the epoch, so a worker on
        another host reads the same deadline.
    budget_s:
        The budget the deadline comes from (for the message).
    """

    loop: str
    start: int
    variants: tuple
    deadline_epoch_s: float | None = None
    budget_s: float | None = None
    #: Round the coefficients to the controller's ``numeric_format`` and
    #: analyse that loop too (for rule ``quantization.robust``).
    prepare_rounding: bool = False
    #: When the chunk holds every variant of its loop: apply the ruleset
    #: there too (a :class:`ruleguard.pipeline.LoopJudging`), so the worker
    #: returns a :class:`JudgedLoop` and no model travels back.
    judge: object | None = None


@record
class LoopStop:
    """Why a loop's variants stop at one variant (the loop is then not analysed,
    except for ``input_error``, which ends the whole check as an input error)."""

    reason: str
    rule: str
    location: Location
    #: False when the stop depends on the clock (the time budget).
    cacheable: bool = True
    #: An input error raised while building the variant (re-raised by the caller).
    input_error: bool = False


@record(eq=False)
class VariantOutcome:
    """One variant after build and analysis.

    Attributes
    ----------
    variant:
        The variant.
    model:
        The built :class:`~ruleguard.analysis.loop.LoopModel` (``None`` when
        ``stop`` is set and the build did not finish). ``model.inner`` is the
        built inner loop of a cascade.
    analysis:
        The :class:`~ruleguard.analysis.results.LoopAnalysis` of the open loop
        (``None`` when ``stop`` is set).
    inner_analysis:
        The analysis of the direct inner loop (``None`` without one).
    numerical_notes:
        ``NumericalWarning`` texts raised while building and analysing this
        variant, in order.
    stop:
        Set when this variant stops the loop.
    prepared:
        Work done ahead for rules (:data:`ROUNDED`: ``(rounded model,
        QuantizationReport, analysis of the rounded loop)``, or the text of
        the ``ValueError`` that made rounding impossible).

    The parts of ``model`` (and of the rounded model) that are equal in
    every variant are one object shared by the outcomes
    (:func:`shared_blocks`).
    """

    variant: object
    model: object | None
    analysis: object | None
    inner_analysis: object | None = None
    numerical_notes: tuple[str, ...] = ()
    stop: LoopStop | None = None
    prepared: dict = field(default_factory=dict)


@record(eq=False)
class JudgedLoop:
    """A whole loop built, analysed and judged where its chunk ran.

    ``result`` is its :class:`~ruleguard.report.model.LoopResult`,
    ``findings`` its findings (waivers applied, in the engine's order),
    ``evaluations`` the number of analysed variants; ``cacheable`` as in
    :class:`ruleguard.pipeline.AnalysedLoop`.
    """

    result: object
    findings: tuple
    evaluations: int
    cacheable: bool = True


#: Key of the rounded loop in ``VariantOutcome.prepared`` / ``Evaluation.prepared``.
ROUNDED = "quantization.rounded"

#: Numeric formats with nothing to round.
EXACT_FORMATS = ("float64", "", None)


def chunk_size(variant_count: int, workers: int) -> int:
    """Variants per chunk for a loop of ``variant_count`` variants on ``workers`` workers."""
    per = math.ceil(max(variant_count, 1) / (max(workers, 1) * CHUNKS_PER_WORKER))
    return max(1, min(MAX_CHUNK_VARIANTS, per))


def split_variants(
    loop: str,
    variants: tuple,
    size: int,
    deadline_epoch_s: float | None = None,
    budget_s: float | None = None,
    *,
    prepare_rounding: bool = False,
    judge: object | None = None,
) -> tuple[VariantChunk, ...]:
    """``variants`` cut into chunks of at most ``size``, in order.

    ``judge`` (the ruleset and selection) goes with a loop that fits one
    chunk: that chunk is then judged where it runs (:class:`JudgedLoop`).
    """
    whole = judge if len(variants) <= max(1, size) else None
    return tuple(
        VariantChunk(
            loop, i, tuple(variants[i:i + size]), deadline_epoch_s, budget_s, prepare_rounding,
            whole,
        )
        for i in range(0, len(variants), max(1, size))
    )


#: The project last asked about (held, so its identity stays its own), its
#: loops by name, and the names of the loops that are another's inner loop.
_NAMED: list = [None, {}, frozenset()]


def _project_tables(project) -> list:
    """``[project, loops by name, inner-loop names]``, made once per project
    (a worker runs many chunks of one project)."""
    if _NAMED[0] is not project:
        _NAMED[:] = [
            project,
            {spec.name: spec for spec in project.loops},
            frozenset(spec.inner for spec in project.loops if spec.inner is not None),
        ]
    return _NAMED


def _loop_named(project, name: str):
    """The loop spec called ``name``."""
    return _project_tables(project)[1][name]


def analyse_chunk(project, chunk: VariantChunk) -> tuple[VariantOutcome, ...] | tuple[JudgedLoop]:
    """Build and analyse the variants of ``chunk``; stop after the first that stops the loop.

    Parameters
    ----------
    project:
        The loaded :class:`~ruleguard.load.spec.Project` (frozen).
    chunk:
        Which loop and which of its variants.

    Returns
    -------
    tuple of VariantOutcome
        One per variant in order, the last one possibly with ``stop`` set;
        or, for a chunk with ``judge`` whose variants all finished, the one
        :class:`JudgedLoop` of its loop.
    """
    spec = _loop_named(project, chunk.loop)
    out: list[VariantOutcome] = []
    for variant in chunk.variants:
        if chunk.deadline_epoch_s is not None and time.time() > chunk.deadline_epoch_s:
            budget = chunk.budget_s if chunk.budget_s is not None else 0.0
            stop = LoopStop(
                f"the time budget of the whole check ({budget:g} s) was used up before "
                f"variant {variant.id} of this loop; raise it with --time-budget",
                "stability.closed-loop",
                spec.location,
                cacheable=False,
            )
            out.append(VariantOutcome(variant, None, None, stop=stop))
            break
        outcome = analyse_variant(project, spec, variant, chunk.prepare_rounding)
        out.append(outcome)
        if outcome.stop is not None:
            break
    if chunk.judge is not None and chunk.start == 0 and len(out) == len(chunk.variants) \
            and all(o.stop is None for o in out):
        from ruleguard.pipeline import judge_loop

        return (judge_loop(project, spec, out, chunk.judge),)
    return shared_blocks(out, {})


def analyse_variant(project, spec, variant, prepare_rounding: bool = False) -> VariantOutcome:
    """Build one variant, check its inner loops, analyse it (see :func:`analyse_chunk`).

    With ``prepare_rounding`` the loop with rounded coefficients is built and
    analysed as well (its numerical warnings are not notes of the variant,
    as when the rule computes it itself).
    """
    import numpy as np

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        model = analysis = inner_analysis = None
        stop = None
        try:
            try:
                model, stop, inner_analysis, analysis = _variant_analysis(project, spec, variant)
            except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
                raise _numerical_failure(spec, variant, exc) from exc
        except LoopNotAnalysable as exc:
            stop = LoopStop(exc.reason, exc.rule, exc.location)
        except InputError as exc:
            stop = LoopStop(exc.message, "", exc.location, input_error=True)
    notes = tuple(
        f"numerical: {w.message}" for w in caught if issubclass(w.category, NumericalWarning)
    )
    prepared = {}
    if prepare_rounding and stop is None and wants_rounding(spec):
        prepared[ROUNDED] = rounded_loop(model, str(spec.controller.fields["numeric_format"]))
    return VariantOutcome(variant, model, analysis, inner_analysis, notes, stop, prepared)


# ------------------------------------------------- blocks shared by the variants
#: The parts of a LoopModel that are the same object in every variant whose
#: parts are equal (the controller side rarely depends on the variant).
SHARED_MODEL_FIELDS = (
    "controller", "filters", "sensor", "controller_path", "discretization", "notes",
)


#: Distinct values of one kind of part a pool keeps (a family that varies the
#: controller has parts that differ in every variant: their pickled bytes are
#: not kept for 10,000 variants).
MAX_SHARED_VALUES = 64


def shared_blocks(outcomes, pool: dict) -> tuple[VariantOutcome, ...]:
    """``outcomes`` with the parts that are equal across variants made one object.

    A loop's variants differ in their plant, so every variant builds a
    controller, filters, sensor (and a rounded controller and filters, and the
    same parts of its inner loops) equal to every other variant's: kept apart,
    10,000 variants hold 10,000 copies, and pickle sends each one. Here every
    model's :data:`SHARED_MODEL_FIELDS` (as one group, so that the links among
    them are kept), each inner loop's and each rounded model's, and each
    rounding report, are replaced by the first equal one met in ``pool``
    (content key: the pickled bytes, so only exactly equal parts are shared;
    the parts are frozen and never changed, so a rule reads the same values).
    ``pool`` is kept by the caller across calls (one per loop in the parent,
    one per chunk in a worker: pickle then sends a shared part once per chunk).
    """
    memo: dict = {}  # identity of what this call has seen -> (it, its shared copy)
    return tuple(_shared_outcome(o, pool, memo) for o in outcomes)


def _shared_outcome(outcome: VariantOutcome, pool: dict, memo: dict) -> VariantOutcome:
    if outcome.model is None:
        return outcome
    model = _shared_model(outcome.model, pool, memo)
    prepared = outcome.prepared
    ahead = prepared.get(ROUNDED)
    if isinstance(ahead, tuple):
        q_model, report, q_analysis = ahead
        prepared = {
            **prepared,
            ROUNDED: (_shared_model(q_model, pool, memo), _shared("report", report, pool, memo),
                      q_analysis),
        }
    if model is outcome.model and prepared is outcome.prepared:
        return outcome
    return VariantOutcome(outcome.variant, model, outcome.analysis, outcome.inner_analysis,
                          outcome.numerical_notes, outcome.stop, prepared)


def _shared_model(model, pool: dict, memo: dict):
    """``model`` (a LoopModel) with its shared parts and inner loops from ``pool``."""
    if model is None:
        return None
    done = memo.get(id(model))
    if done is not None:
        return done[1]
    import dataclasses

    parts = tuple(getattr(model, name) for name in SHARED_MODEL_FIELDS)
    # the parts of a rounded model that it keeps from its model (the sensor)
    # are already replaced: look them up by identity first
    parts = tuple(memo[id(p)][1] if id(p) in memo else p for p in parts)
    common = _shared("model-parts", parts, pool, memo, parts)
    inner = _shared_model(model.inner, pool, memo)
    changes = {
        name: new
        for name, new in zip(SHARED_MODEL_FIELDS, common, strict=True)
        if new is not getattr(model, name)
    }
    if inner is not model.inner:
        changes["inner"] = inner
    for old, new in zip(parts, common, strict=True):
        memo[id(old)] = (old, new)  # the old part is kept alive, so its id stays unique
    result = dataclasses.replace(model, **changes) if changes else model
    memo[id(model)] = (model, result)
    return result


def _shared(kind: str, value, pool: dict, memo: dict, members: tuple = ()):
    """The first value equal to ``value`` (same pickled bytes) met in ``pool``.

    ``members``: the objects ``value`` is made of (a group of parts); a group
    of the same objects met before in this call is not pickled again.
    """
    import pickle

    ident = (kind, *map(id, members or (value,)))
    hit = memo.get(ident)
    if hit is not None:
        return hit[1]
    known = pool.setdefault(kind, {})
    try:
        content = pickle.dumps(value, protocol=pickle.HIGHEST_PROTOCOL)
    except (pickle.PicklingError, TypeError, AttributeError):  # kept as it is (one process)
        memo[ident] = (value, value)
        return value
    found = known.get(content, known)
    if found is known:  # not met before
        found = value
        if len(known) < MAX_SHARED_VALUES:  # parts that differ in every variant: not kept
            known[content] = value
    memo[ident] = (value, found)  # keeps ``value`` alive: its id stays unique in this call
    return found


def wants_rounding(spec) -> bool:
    """A sampled loop whose controller declares a format other than float64."""
    value = spec.controller.fields.get("numeric_format")
    return spec.sample_rate_hz is not None and (
        None if value is None else str(value)
    ) not in EXACT_FORMATS


def rounded_loop(model, numeric_format: str):
    """``(rounded model, report, analysis)``, or the text of the ValueError of
    a loop whose controller path cannot be split (rule ``quantization.robust``)."""
    from ruleguard.analysis.margins import analyse_open_loop
    from ruleguard.models.quantize import quantized_model

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            q_model, report = quantized_model(model, numeric_format)
        except ValueError as exc:
            return str(exc)
        return q_model, report, analyse_open_loop(q_model.open_loop)


def _variant_analysis(project, spec, variant):
    """``(model, stop, inner_analysis, analysis)``; ``analysis`` is None when
    an inner loop is unstable (``stop`` says why)."""
    from ruleguard.analysis.margins import analyse_open_loop
    from ruleguard.models.assemble import build_loop

    with stage("build"):  # recorded when the chunk runs in the recording process
        model = build_loop(project, spec, variant)
    with stage("analysis"):
        inner_reason, inner_analysis = _inner_loop_problem(model, variant, remembered_analysis)
    if inner_reason is not None:
        location = spec.field_locations.get("inner", spec.location)
        stop = LoopStop(inner_reason, "stability.closed-loop", location)
        return model, stop, inner_analysis, None
    if not model.open_loop.rational.is_proper:
        raise LoopNotAnalysable(
            "the open loop has more zeros than poles (improper): its frequency "
            "response grows without bound and the Nyquist contour cannot be closed",
            "stability.closed-loop",
            spec.controller.location,
        )
    analyse = remembered_analysis if _is_inner_loop(project, spec.name) else analyse_open_loop
    with stage("analysis"):
        analysis = analyse(model.open_loop)
    return model, None, inner_analysis, analysis


#: Analyses of open loops met before in this process, by content (see
#: :func:`remembered_analysis`), the most recently used last.
_ANALYSES: dict = {}
_ANALYSES_MAX = 64


def remembered_analysis(open_loop):
    """``analyse_open_loop(open_loop)``, done once per distinct open loop in a process.

    A cascade analyses its inner loops again in every variant of every outer
    loop, and a loop that is another's inner loop is analysed as itself too:
    the demo's tilt axis asks for 36 analyses of 21 distinct open loops. The
    key is a digest of the pickled open loop (equal bytes: the same zeros,
    poles, gain, delay and factors, so the same result; anything else is
    analysed). The analysis is frozen, so the variants share one object, as
    :func:`shared_blocks` shares their equal parts. The warnings the first
    analysis raised are raised again on every later use, so each variant's
    numerical notes are those it would have without this memo.
    """
    import hashlib
    import pickle

    from ruleguard.analysis.margins import analyse_open_loop
    from ruleguard.memo import remembered

    try:
        key = hashlib.blake2b(pickle.dumps(open_loop, protocol=pickle.HIGHEST_PROTOCOL),
                              digest_size=20).digest()
    except (pickle.PicklingError, TypeError, AttributeError):
        return analyse_open_loop(open_loop)
    return remembered(_ANALYSES, _ANALYSES_MAX, key, analyse_open_loop, open_loop)


def _is_inner_loop(project, name: str) -> bool:
    """Whether some loop of ``project`` has the loop ``name`` as its inner loop
    (a set made once per project: asked for every variant of every loop)."""
    return name in _project_tables(project)[2]


def _numerical_failure(spec, variant, exc: Exception) -> LoopNotAnalysable:
    which = "" if variant.id == "nominal" else f" (variant {variant.id})"
    return LoopNotAnalysable(
        f"numerical failure while building or analysing the loop{which}: {exc}. The loop "
        "could not be verified; check the magnitudes of its gains and coefficients (values "
        "this large or small overflow double precision). If they are physically sensible, "
        "please report this as a ruleguard bug.",
        "stability.closed-loop",
        spec.controller.location,
    )


def _inner_loop_problem(model, variant, analyse):
    """Why the inner loops of a cascade make the outer loop unusable (or None),
    and the analysis of the direct inner loop (None without one)."""
    inner = model.inner
    direct = None
    while inner is not None:
        analysis = analyse(inner.open_loop)
        if direct is None:
            direct = analysis
        if not analysis.stability.stable:
            which = "" if variant.id == "nominal" else f" in variant {variant.id}"
            reason = (
                f"inner loop {inner.name} is not closed-loop stable{which}; "
                f"the outer loop {model.name} was not analysed"
            )
            return reason, direct
        inner = inner.inner
    return None, direct
