"""Loops as models: the blocks of one loop variant and the open loop they make.

:func:`build_loop` (in :mod:`ruleguard.models.assemble`) turns a
:class:`~ruleguard.load.spec.LoopSpec` and a variant's parameter values into a
:class:`LoopModel`; the analysis only needs ``LoopModel.open_loop``, the rules
look at the blocks as well.
"""

from __future__ import annotations

from dataclasses import field

from ruleguard.analysis.openloop import OpenLoop
from ruleguard.frozen import record
from ruleguard.location import Location
from ruleguard.models.lti import Factored, MeasuredResponse


@record(eq=False)
class BlockModel:
    """One block of the loop as designed and as run.

    Attributes
    ----------
    role:
        ``"controller"``, ``"filter"``, ``"plant"``, ``"sensor"``.
    label:
        Human name of the block (``"velocity.filters.0 (notch)"``).
    kind:
        The input kind (``"pid"``, ``"notch"``, ``"biquad"``, ...).
    continuous:
        The s-plane block as designed (``None`` for blocks given in z, or
        measured plants).
    discrete:
        The z-plane block the loop runs (``None`` in a continuous loop).
    method:
        Discretization method used (``"tustin"``, ``"zoh"``, ``"given"``,
        ...), ``None`` in a continuous loop.
    characteristic_hz:
        The frequencies that define the block (notch centre, cutoffs, ...),
        by name.
    location:
        The table the block comes from.
    measured:
        The measured response of a ``measured_response`` plant or sensor
        (``continuous`` is ``None`` then).
    """

    role: str
    label: str
    kind: str
    continuous: Factored | None
    discrete: Factored | None
    method: str | None
    characteristic_hz: dict = field(default_factory=dict)
    location: Location = Location("")
    measured: MeasuredResponse | None = None


@record(eq=False)
class LoopModel:
    """One variant of one loop, built.

    ``open_loop`` is L = C F1..Fn G H (delays) in the loop's domain.
    ``controller_path`` is C F1..Fn in the loop's domain (for controller rules
    and masks). ``inner`` is the built inner loop of a cascade.
    """

    name: str
    sample_rate_hz: float | None
    open_loop: OpenLoop
    controller: BlockModel
    filters: tuple[BlockModel, ...]
    plant: BlockModel
    sensor: BlockModel | None
    controller_path: Factored
    total_delay_s: float
    discretization: dict
    notes: tuple[str, ...] = ()
    inner: LoopModel | None = None
