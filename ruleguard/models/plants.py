"""Plant (and sensor) registry entries as factored blocks or measured responses.

:func:`plant_model` turns a :class:`~ruleguard.load.spec.PlantEntry` into an
s-plane :class:`~ruleguard.models.lti.Factored` (transport delay exact in
``delay_s``) or a :class:`~ruleguard.models.lti.MeasuredResponse`, once a
variant has fixed its parameter values. Every kind of FORMATS.md section 2:

* ``transfer_function``: numerator / denominator in descending powers of s.
* ``zero_pole_gain``: ``gain prod(s - zeros)/prod(s - poles)``
  (leading-coefficient gain); a root is a real number, ``{re, im}`` (the
  conjugate pair ``re +- j im``) or ``{freq_hz, damping}`` (the roots of
  ``s^2 + 2 zeta omega s + omega^2``, omega = 2 pi freq_hz).
* ``state_space``: ``a, b, c, d`` (SISO), factored by
  :meth:`~ruleguard.models.lti.StateSpace.to_factored`.
* ``first_order_dead_time``: ``gain exp(-delay_s s)/(time_constant_s s + 1)``.
* ``second_order``: ``gain omega^2/(s^2 + 2 zeta omega s + omega^2)``
  (``gain`` is the DC gain).
* ``integrator_dead_time``: ``gain exp(-delay_s s)/s``.
* ``dc_motor``: :func:`dc_motor_coefficients`.
* ``two_mass``: :func:`two_mass_coefficients`.
* ``measured_response``: the CSV data as a
  :class:`~ruleguard.models.lti.MeasuredResponse` with the declared
  ``unstable_poles`` and ``integrators``.

Every kind accepts ``delay_s`` (an exact transport delay; for
``measured_response`` the assembly adds it to the loop's delay).
Fields may be numbers or expressions; they are evaluated over the entry's
``parameters`` with the variant's values laid over them (a varied name that
is a field, such as ``gain``, replaces the field).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from ruleguard.errors import InputError
from ruleguard.load.spec import PlantEntry
from ruleguard.models.fieldvalues import FieldReader, is_expression, resolve_parameters
from ruleguard.models.lti import Factored, MeasuredResponse, StateSpace
from ruleguard.models.polynomials import (
    polynomial_roots,
    second_order_pair,
    second_order_roots,
)

TWO_PI = 2.0 * math.pi


def plant_reader(entry: PlantEntry, overrides: Mapping[str, float]) -> FieldReader:
    """A field reader for ``entry`` with the variant's values (unqualified names)."""
    env = resolve_parameters(entry.parameters, overrides, entry.location)
    field_overrides = {k: v for k, v in overrides.items() if k not in entry.parameters}
    return FieldReader(entry.fields, entry.field_locations, entry.location, env, field_overrides)


def plant_model(entry: PlantEntry, overrides: Mapping[str, float] | None = None
                ) -> Factored | MeasuredResponse:
    """The entry as an s-plane block (or a measured response) for one variant.

    Parameters
    ----------
    entry:
        A plant registry entry (plants and sensors alike).
    overrides:
        The variant's values of this entry's varied names (unqualified).

    Raises
    ------
    InputError
        For a field that does not give a usable model (located).
    """
    reader = plant_reader(entry, overrides or {})
    builder = _KINDS.get(entry.kind)
    if builder is None:
        raise InputError.at(entry.location,
                            f"unknown plant kind {entry.kind!r}; expected one of {sorted(_KINDS)}")
    model = builder(entry, reader)
    if isinstance(model, Factored) and not model.is_proper:
        raise InputError.at(entry.location,
                            f"plant {entry.name!r} is improper (more zeros than poles)")
    return model


def plant_delay_s(entry: PlantEntry, overrides: Mapping[str, float] | None = None) -> float:
    """The entry's ``delay_s`` for one variant (0 when absent)."""
    reader = plant_reader(entry, overrides or {})
    return _delay(reader)


def _delay(reader: FieldReader) -> float:
    tau = reader.number("delay_s", 0.0)
    if not (tau >= 0 and math.isfinite(tau)):
        raise InputError.at(reader.where("delay_s"), f"delay_s must be >= 0, got {tau}")
    return tau


def _coefficients(reader: FieldReader, key: str) -> list[float]:
    raw = reader.raw(key)
    if not isinstance(raw, (list, tuple)) or not raw:
        raise InputError.at(reader.where(key), f"{key}: expected a non-empty list")
    return [reader.item(v, key) for v in raw]


def _from_coefficients(reader: FieldReader, num, den, what: str) -> Factored:
    den = np.asarray(den, dtype=float)
    if not np.any(den != 0.0):
        raise InputError.at(reader.where("denominator"), f"{what}: the denominator is zero")
    num = np.asarray(num, dtype=float)
    nz = np.flatnonzero(num != 0.0)
    dz = np.flatnonzero(den != 0.0)
    if nz.size == 0:
        return Factored([], polynomial_roots(den), 0.0, _delay(reader))
    num, den = num[nz[0]:], den[dz[0]:]
    return Factored(polynomial_roots(num), polynomial_roots(den), num[0] / den[0], _delay(reader))


def _transfer_function(entry: PlantEntry, reader: FieldReader) -> Factored:
    num = _coefficients(reader, "numerator")
    den = _coefficients(reader, "denominator")
    return _from_coefficients(reader, num, den, "transfer_function")


def _roots(reader: FieldReader, key: str) -> np.ndarray:
    raw = reader.raw(key, [])
    if not isinstance(raw, (list, tuple)):
        raise InputError.at(reader.where(key), f"{key}: expected a list of roots")
    roots: list[complex] = []
    for i, item in enumerate(raw):
        where = f"{key}.{i}"
        if type(item) is dict or isinstance(item, Mapping):
            if item.keys() == {"re", "im"}:
                re = reader.item(item["re"], where)
                im = reader.item(item["im"], where)
                roots.extend([complex(re, im), complex(re, -im)])
            elif item.keys() == {"freq_hz", "damping"}:
                f = reader.item(item["freq_hz"], where)
                zeta = reader.item(item["damping"], where)
                if not f > 0:
                    raise InputError.at(reader.where(key), f"{where}.freq_hz must be positive")
                roots.extend(second_order_pair(TWO_PI * f, zeta))
            else:
                raise InputError.at(reader.where(key),
                                    f"{where}: expected {{re, im}} or {{freq_hz, damping}}")
        elif isinstance(item, (int, float)) and not isinstance(item, bool) or is_expression(item):
            roots.append(complex(reader.item(item, where), 0.0))
        else:
            raise InputError.at(reader.where(key), f"{where}: expected a number or a table")
    return np.asarray(roots, dtype=complex)


def _zero_pole_gain(entry: PlantEntry, reader: FieldReader) -> Factored:
    return Factored(_roots(reader, "zeros"), _roots(reader, "poles"), reader.number("gain"),
               _delay(reader))


def _matrix(reader: FieldReader, key: str) -> np.ndarray:
    raw = reader.raw(key)
    if not isinstance(raw, (list, tuple)):
        raise InputError.at(reader.where(key), f"{key}: expected a matrix (list of rows)")
    rows = []
    for row in raw:
        if not isinstance(row, (list, tuple)):
            raise InputError.at(reader.where(key), f"{key}: every row must be a list")
        rows.append([reader.item(v, key) for v in row])
    widths = {len(r) for r in rows}
    if len(widths) > 1:
        raise InputError.at(reader.where(key), f"{key}: rows of different lengths")
    return np.array(rows, dtype=float).reshape(len(rows), widths.pop() if widths else 0)


def _state_space(entry: PlantEntry, reader: FieldReader) -> Factored:
    a = _matrix(reader, "a")
    n = a.shape[0]
    b = _matrix(reader, "b")
    c = _matrix(reader, "c")
    d = _matrix(reader, "d") if reader.raw("d") is not None else np.zeros((1, 1))
    for key, arr, shape in (("a", a, (n, n)), ("b", b, (n, 1)), ("c", c, (1, n)),
                            ("d", d, (1, 1))):
        if arr.shape != shape:
            raise InputError.at(reader.where(key),
                                f"{key}: expected shape {shape[0]}x{shape[1]}, "
                                f"got {arr.shape[0]}x{arr.shape[1]}")
    return StateSpace(a, b, c, d, _delay(reader)).to_factored()


def _first_order_dead_time(entry: PlantEntry, reader: FieldReader) -> Factored:
    gain = reader.number("gain")
    tau = reader.number("time_constant_s")
    if not tau > 0:
        raise InputError.at(reader.where("time_constant_s"), "time_constant_s must be positive")
    return Factored([], [-1.0 / tau], gain / tau, _delay(reader))


def _second_order(entry: PlantEntry, reader: FieldReader) -> Factored:
    gain = reader.number("gain")
    f = reader.number("freq_hz")
    if not f > 0:
        raise InputError.at(reader.where("freq_hz"), "freq_hz must be positive")
    zeta = reader.number("damping")
    w = TWO_PI * f
    return Factored([], second_order_roots(w, zeta), gain * w * w, _delay(reader))


def _integrator_dead_time(entry: PlantEntry, reader: FieldReader) -> Factored:
    return Factored([], [0.0], reader.number("gain"), _delay(reader))


def dc_motor_coefficients(resistance_ohm: float, inductance_h: float, torque_constant: float,
                          inertia: float, friction: float, output: str
                          ) -> tuple[list[float], list[float]]:
    """Numerator and denominator (descending powers of s) of a DC motor, input volts.

    Derivation (armature circuit and rotor, SI units, torque constant equal
    to the back-emf constant K):

    * armature: ``L di/dt = v - R i - K omega`` -> ``(L s + R) I = V - K Omega``
    * rotor: ``J domega/dt = K i - b omega`` -> ``(J s + b) Omega = K I``

    Substituting ``Omega = K I / (J s + b)`` in the armature equation gives
    ``I [(L s + R)(J s + b) + K^2] = (J s + b) V``, hence

    * current: ``I/V = (J s + b) / ((L s + R)(J s + b) + K^2)``
    * speed: ``Omega/V = K / ((L s + R)(J s + b) + K^2)``

    with ``(L s + R)(J s + b) + K^2 = L J s^2 + (L b + R J) s + (R b + K^2)``.
    """
    den = [inductance_h * inertia, inductance_h * friction + resistance_ohm * inertia,
           resistance_ohm * friction + torque_constant**2]
    if output == "speed":
        return [torque_constant], den
    if output == "current":
        return [inertia, friction], den
    raise ValueError(f"unknown output {output!r}")


def _dc_motor(entry: PlantEntry, reader: FieldReader) -> Factored:
    output = reader.text("output", "speed")
    if output not in ("speed", "current"):
        raise InputError.at(reader.where("output"),
                            f"output must be 'speed' or 'current', got {output!r}")
    values = {}
    for key in ("resistance_ohm", "inductance_h", "torque_constant_nm_per_a",
                "inertia_kg_m2", "friction_nm_s_per_rad"):
        if key == "friction_nm_s_per_rad":
            values[key] = reader.number(key, 0.0)
        else:
            values[key] = reader.number(key)
        if values[key] < 0:
            raise InputError.at(reader.where(key), f"{key} must not be negative")
    if values["resistance_ohm"] == 0 and values["inductance_h"] == 0:
        raise InputError.at(reader.location, "dc_motor needs resistance_ohm or inductance_h > 0")
    if values["inertia_kg_m2"] == 0 and values["friction_nm_s_per_rad"] == 0:
        raise InputError.at(reader.location,
                            "dc_motor needs inertia_kg_m2 or friction_nm_s_per_rad > 0")
    num, den = dc_motor_coefficients(values["resistance_ohm"], values["inductance_h"],
                                     values["torque_constant_nm_per_a"], values["inertia_kg_m2"],
                                     values["friction_nm_s_per_rad"], output)
    return _from_coefficients(reader, num, den, "dc_motor")


def two_mass_coefficients(inertia_motor: float, inertia_load: float, stiffness: float,
                          damping: float, output: str) -> tuple[list[float], list[float]]:
    """Numerator and denominator (descending powers of s) of a two-mass drive, input torque.

    Derivation: motor inertia ``J_m`` driven by torque ``T``, load inertia
    ``J_l``, coupled by a shaft of stiffness ``k`` and damping ``c``; speeds
    ``omega_m``, ``omega_l``, shaft torque ``T_s = (c + k/s)(Omega_m -
    Omega_l)``:

    * ``J_m s Omega_m = T - T_s`` and ``J_l s Omega_l = T_s``.

    With ``K(s) = c s + k`` (multiply by s): ``J_l s^2 Omega_l = K (Omega_m -
    Omega_l)`` gives ``Omega_l = K Omega_m / (J_l s^2 + K)``. Then ``J_m s^2
    Omega_m + K Omega_m - K Omega_l = s T`` gives ``Omega_m [(J_m s^2 + K)(J_l
    s^2 + K) - K^2] = s T (J_l s^2 + K)``, and ``(J_m s^2 + K)(J_l s^2 + K) -
    K^2 = s^2 (J_m J_l s^2 + (J_m + J_l) K)``. Hence

    * motor speed: ``Omega_m/T = (J_l s^2 + c s + k) / (s (J_m J_l s^2 +
      (J_m + J_l)(c s + k)))``
    * load speed: ``Omega_l/T = (c s + k) / (s (J_m J_l s^2 + (J_m + J_l)(c s
      + k)))``

    a rigid-body integrator, the resonance of ``J_m J_l s^2 + (J_m + J_l)(c s
    + k)`` and, at the motor, the anti-resonance of ``J_l s^2 + c s + k``.
    """
    jm, jl, k, c = inertia_motor, inertia_load, stiffness, damping
    den = [jm * jl, (jm + jl) * c, (jm + jl) * k, 0.0]
    if output == "motor_speed":
        return [jl, c, k], den
    if output == "load_speed":
        return [c, k], den
    raise ValueError(f"unknown output {output!r}")


def _two_mass(entry: PlantEntry, reader: FieldReader) -> Factored:
    output = reader.text("output", "motor_speed")
    if output not in ("motor_speed", "load_speed"):
        raise InputError.at(reader.where("output"),
                            f"output must be 'motor_speed' or 'load_speed', got {output!r}")
    jm = reader.number("inertia_motor_kg_m2")
    jl = reader.number("inertia_load_kg_m2")
    k = reader.number("stiffness_nm_per_rad")
    c = reader.number("damping_nm_s_per_rad", 0.0)
    for key, v in (("inertia_motor_kg_m2", jm), ("inertia_load_kg_m2", jl),
                   ("stiffness_nm_per_rad", k)):
        if not v > 0:
            raise InputError.at(reader.where(key), f"{key} must be positive")
    if c < 0:
        raise InputError.at(reader.where("damping_nm_s_per_rad"),
                            "damping_nm_s_per_rad must not be negative")
    num, den = two_mass_coefficients(jm, jl, k, c, output)
    # The rigid-body pole s = 0 is kept exact: factor it out before rooting.
    coupled = Factored(polynomial_roots(num), np.concatenate([[0.0], polynomial_roots(den[:3])]),
                  _leading(num) / den[0], _delay(reader))
    return coupled


def _leading(coefficients) -> float:
    c = np.asarray(coefficients, dtype=float)
    return float(c[np.flatnonzero(c != 0.0)[0]])


#: A resonant peak must stand this far (dB) above the data on both sides.
RESONANCE_PROMINENCE_DB = 3.0
#: Fewer samples than this inside a peak's half-power band: too coarse.
MIN_POINTS_PER_MODE = 3


def coarse_resonances(w, magnitude_db) -> list[tuple[float, float, float, int]]:
    """Resonant peaks of tabulated data sampled too coarsely to be trusted.

    A peak is a local maximum of the magnitude standing at least
    ``RESONANCE_PROMINENCE_DB`` above the data on both sides. Its half-power
    band is where the magnitude stays within 3 dB of the peak (interpolated
    linearly between samples; a second-order mode's band is about
    ``2 zeta w_n`` wide, so ``zeta ~ width / (2 f_peak)``: Ogata, Modern
    Control Engineering, 5th ed., 2010, section 7-2, from memory). With fewer
    than ``MIN_POINTS_PER_MODE`` samples in that band the peak height and the
    phase swing through it are not resolved (the linear interpolation of
    FORMATS.md section 2 cuts the peak short).

    Returns
    -------
    list of (peak_hz, width_hz, spacing_hz, points_in_band)
    """
    w = np.asarray(w, dtype=float)
    m = np.asarray(magnitude_db, dtype=float)
    found = []
    for i in range(1, m.size - 1):
        if not (m[i] > m[i - 1] and m[i] >= m[i + 1]):
            continue
        top = m[i] - 3.0
        left = i
        while left > 0 and m[left - 1] > top:
            left -= 1
        right = i
        while right < m.size - 1 and m[right + 1] > top:
            right += 1
        if left == 0 or right == m.size - 1:
            continue  # the band runs off the data: not a resolved peak
        lo_side = np.min(m[: left + 1])
        hi_side = np.min(m[right:])
        if m[i] - max(lo_side, hi_side) < RESONANCE_PROMINENCE_DB:
            continue
        width = _level_crossing(w, m, top, right + 1, right) - _level_crossing(
            w, m, top, left - 1, left
        )
        points = right - left + 1
        if points < MIN_POINTS_PER_MODE:
            spacing = float(w[i + 1] - w[i - 1]) / 2.0
            found.append((w[i] / TWO_PI, width / TWO_PI, spacing / TWO_PI, points))
    return found


def _level_crossing(w: np.ndarray, m: np.ndarray, level: float, a: int, b: int) -> float:
    """Where the straight line from sample ``a`` to sample ``b`` reaches ``level``."""
    t = (level - m[a]) / (m[b] - m[a])
    return float(w[a] + t * (w[b] - w[a]))


def _measured(entry: PlantEntry, reader: FieldReader) -> MeasuredResponse:
    data = entry.measured
    if data is None:
        raise InputError.at(reader.where("file"), "the measured response data were not read")
    unstable = reader.raw("unstable_poles", 0)
    integrators = reader.raw("integrators", 0)
    for key, v in (("unstable_poles", unstable), ("integrators", integrators)):
        if isinstance(v, bool) or not isinstance(v, (int, float)) or v < 0 or int(v) != v:
            raise InputError.at(reader.where(key), f"{key} must be a whole number >= 0")
    w = TWO_PI * np.asarray(data.freq_hz, dtype=float)
    magnitude_db = np.asarray(data.magnitude_db, dtype=float)
    notes = tuple(
        f"measured data {data.file}: the resonance near {peak_hz:.4g} Hz (half-power width "
        f"about {width_hz:.3g} Hz) is described by {points} point{'s' if points != 1 else ''}; "
        f"the data spacing there ({spacing_hz:.3g} Hz) is coarser than the mode's width, so "
        "its peak and phase may be misread: sweep more densely around it"
        for peak_hz, width_hz, spacing_hz, points in coarse_resonances(w, magnitude_db)
    )
    try:
        return MeasuredResponse(w, magnitude_db,
                                np.asarray(data.phase_deg, dtype=float),
                                unstable_poles=int(unstable), integrators=int(integrators),
                                source=data.file, notes=notes)
    except ValueError as exc:
        raise InputError.at(reader.where("file"), f"measured response: {exc}") from None


_KINDS: dict[str, Any] = {
    "transfer_function": _transfer_function,
    "zero_pole_gain": _zero_pole_gain,
    "state_space": _state_space,
    "first_order_dead_time": _first_order_dead_time,
    "second_order": _second_order,
    "integrator_dead_time": _integrator_dead_time,
    "dc_motor": _dc_motor,
    "two_mass": _two_mass,
    "measured_response": _measured,
}

#: Plant kinds of the registry.
PLANT_KINDS = tuple(sorted(_KINDS))
