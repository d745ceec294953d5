"""Rule ``loop.hidden-cancellation``: unstable modes cancelled out of L.

When a controller or filter zero sits on an unstable or marginal plant pole
(or a plant zero on an unstable or marginal controller pole), the pole
disappears from L = C F G H and the Nyquist test, margins and Bode plots all
look fine, yet the closed loop is not internally stable: the cancelled mode
is still there in the transfer from a disturbance at the plant input to the
output (plant pole cancelled) or from the reference to the controller
output (controller pole cancelled), and it grows or never decays.

The analysis keeps every pole and zero of L (METHODS.md "Representation"),
so the cancellation is found by comparing the roots of the two sides.

References
----------
K. J. Åström and R. M. Murray, *Feedback Systems*, 2nd ed., Princeton
University Press, 2021 (the gang of four; cancellation of unstable poles
and internal stability; from memory).
J. C. Doyle, B. A. Francis and A. R. Tannenbaum, *Feedback Control Theory*,
Macmillan, 1992 (internal stability: no unstable pole-zero cancellation
between C and P; from memory).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.deferred import numpy as np
from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import domain_block, note, param, unanalysed_notes, variant_id
from ruleguard.rules.locations import block_location, key, plant_location
from ruleguard.rules.spec import Parameter, RuleSpec


def _not_stable_mask(factored, roots: np.ndarray) -> np.ndarray:
    """Roots that are unstable or on the boundary (marginal) in the block's domain."""
    roots = np.asarray(roots, dtype=complex)
    return factored.unstable_mask(roots) | factored.on_boundary(roots)


def _is_unstable(block, discrete: bool, pole: complex) -> bool:
    factored = domain_block(block, discrete)
    return bool(factored.unstable_mask(np.array([pole]))[0])


def _reference_scale(blocks) -> float:
    """Smallest nonzero root magnitude of the loop (rad/s, s-plane), at least tiny.

    Used as the absolute floor of the relative tolerance so that a zero a
    millionth of the loop's slowest dynamics away from an integrator counts
    as cancelling it.
    """
    mags = []
    for b in blocks:
        r = np.abs(np.concatenate([b.zeros, b.poles]))
        mags.extend(r[r > 0].tolist())
    return float(min(mags)) if mags else 1.0


def _distance(pole: complex, zero: complex, discrete: bool, floor: float) -> float:
    """``|pole - zero|`` relative to ``max(|pole|, |zero|, floor)`` (1 for z-plane roots)."""
    scale = max(abs(pole), abs(zero), 1.0 if discrete else floor)
    return abs(pole - zero) / scale


def _root_hz(root: complex, sample_time_s: float | None) -> float:
    if sample_time_s is None:
        return abs(root) / (2.0 * math.pi)
    return abs(np.angle(root)) / (2.0 * math.pi * sample_time_s)


def _describe(root: complex, discrete: bool) -> str:
    var = "z" if discrete else "s"
    return f"{var} = {root.real:.6g}{root.imag:+.6g}j"


def hidden_cancellation(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """No unstable or marginal pole of one side cancelled by a zero of the other side."""
    tolerance = float(param(params, "tolerance", 1e-6))
    base = key(ctx.spec.controller.location.key, "hidden-cancellation")
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "pole-zero cancellation", key_path=base)
    discrete = ctx.spec.sample_rate_hz is not None
    out: list[Violation] = []
    # key -> (distance, evaluation, side, pole block, zero block, pole, zero, h, z-plane?)
    found: dict[str, tuple] = {}
    unknown_plant = None
    for ev in ctx.evaluations:
        model = ev.model
        dom = discrete
        if discrete and model.plant.discrete is None and model.plant.continuous is not None:
            # the sampled plant path is known only by its response (hold factor times the
            # continuous model): compare the s-plane designs of both sides instead
            dom = False
        ctrl_blocks = [(b, domain_block(b, dom)) for b in (model.controller, *model.filters)]
        ctrl_blocks = [(b, z) for b, z in ctrl_blocks if z is not None]
        plant_side = [(b, domain_block(b, dom)) for b in (model.plant, model.sensor)]
        plant_side = [(b, z) for b, z in plant_side if b is not None and z is not None]
        if domain_block(model.plant, dom) is None:
            unknown_plant = unknown_plant or ev
        all_factored = [z for _, z in ctrl_blocks + plant_side]
        if not all_factored:
            continue
        floor = _reference_scale(all_factored)
        pairs = (("plant", plant_side, ctrl_blocks), ("controller", ctrl_blocks, plant_side))
        used: set[tuple[int, int]] = set()  # one zero cancels one pole (and its conjugate)
        for side, pole_blocks, zero_blocks in pairs:
            for pb, pz in pole_blocks:
                candidates = pz.poles[_not_stable_mask(pz, pz.poles)]
                candidates = sorted(candidates, key=lambda r: (abs(r), r.imag))
                for rank, pole in enumerate(candidates):
                    pole = complex(pole)
                    if pole.imag < 0:
                        continue  # the conjugate is reported with its partner
                    for zb, zz in zero_blocks:
                        if zz.zeros.size == 0:
                            continue
                        dist = np.array(
                            [
                                np.inf
                                if (id(zz), j) in used
                                else _distance(pole, complex(z), dom, floor)
                                for j, z in enumerate(zz.zeros)
                            ]
                        )
                        i = int(np.argmin(dist))
                        if dist[i] > tolerance:
                            continue
                        used.add((id(zz), i))
                        ident = f"{side}:{pb.label}:{zb.label}:pole{rank}"
                        best = found.get(ident)
                        if best is None or dist[i] < best[0]:
                            found[ident] = (
                                float(dist[i]), ev, side, pb, zb, pole, complex(zz.zeros[i]),
                                pz.sample_time_s, dom,
                            )
    if unknown_plant is not None:
        out.append(
            note(
                "pole-zero cancellation against the plant not checked: the plant "
                f"({ctx.spec.plant}) has no factored form (measured data), its poles and "
                "zeros are unknown",
                plant_location(ctx) or ctx.spec.location,
                key_path=key(base, "plant-unknown"),
                variant=variant_id(unknown_plant),
            )
        )
    for ident in sorted(found):
        dist, ev, side, pb, zb, pole, zero, h, dom = found[ident]
        kind = "unstable" if _is_unstable(pb, dom, pole) else "marginal"
        if side == "plant":
            message = (
                f"{kind} plant pole at {_describe(pole, dom)} is cancelled by a zero of "
                f"{zb.label} at {_describe(zero, dom)}: L looks fine but the closed loop "
                "is not internally stable (the mode stays in the response to load "
                "disturbances)"
            )
            location = block_location(ctx, zb)
            related = (block_location(ctx, pb),)
        else:
            message = (
                f"{kind} pole of {pb.label} at {_describe(pole, dom)} is cancelled by a "
                f"plant zero at {_describe(zero, dom)}: L looks fine but the closed loop "
                "is not internally stable (the controller output grows)"
            )
            location = block_location(ctx, pb)
            related = (block_location(ctx, zb),)
        out.append(
            Violation(
                variant=variant_id(ev),
                message=message,
                measured=dist,
                limit=tolerance,
                unit="relative distance",
                frequency_hz=_root_hz(pole, h),
                location=location,
                related=related,
                key_path=key(base, ident),
            )
        )
    return out


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="loop.hidden-cancellation",
        default_severity=Severity.ERROR,
        summary="No unstable or marginal pole cancelled by a zero of the other side of the loop.",
        explanation=(
            "Compares, in every variant, the unstable and marginal poles (right half-plane "
            "or imaginary axis; outside or on the unit circle) of the plant and sensor with "
            "the zeros of the controller and filters, and the unstable or marginal poles of "
            "the controller and filters with the plant's zeros. A pair closer than "
            "`tolerance` (relative to the root's magnitude; for roots near s = 0, relative "
            "to the loop's slowest corner frequency) is a cancellation.\n\n"
            "Why it matters: the cancelled pole vanishes from L, so Nyquist, margins and "
            "sensitivity all look fine, but the closed loop is not internally stable: a "
            "load disturbance excites the cancelled plant mode (an integrator drifts, an "
            "unstable mode runs away), or the controller output grows without bound while "
            "the measured output looks settled. Exact cancellation never holds on the real "
            "plant, so the design is also fragile.\n\n"
            "How to fix it: do not place controller zeros on unstable or integrating plant "
            "poles (move the zero, or stabilise the mode by feedback instead), and do not "
            "let an integrator in the controller meet a plant zero at the origin (a "
            "differentiating sensor or a high-pass)."
        ),
        source="internal stability (Doyle, Francis & Tannenbaum, Feedback Control Theory, "
        "1992; Åström & Murray, Feedback Systems, 2nd ed., 2021); tolerance 1e-6: common "
        "practice",
        parameters=(
            Parameter(
                "tolerance",
                "number",
                None,
                1e-6,
                "relative distance below which a pole and a zero cancel",
                minimum=0.0,
            ),
        ),
        function=hidden_cancellation,
    ),
)
