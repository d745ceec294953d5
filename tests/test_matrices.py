"""numpy-only matrix functions (ruleguard.models.matrices) against independent references.

References: scipy.linalg.expm (Al-Mohy & Higham 2009, a different algorithm),
mpmath.expm at 40 digits, closed forms (the exponential of a rotation block
and of a Jordan block: e^{[[s, w], [-w, s]] t} = e^{s t} [[cos wt, sin wt],
[-sin wt, cos wt]], e^{(l I + N) t} = e^{l t} sum_k (N t)^k / k!),
scipy.linalg.matrix_balance, and the QZ algorithm (scipy.linalg.eigvals of
the Rosenbrock pencil) for the invariant zeros.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys

import mpmath
import numpy as np
import pytest
import scipy.linalg

from ruleguard.models.matrices import balance_scaling, expm, siso_zeros


def rel_norm_err(got: np.ndarray, ref: np.ndarray) -> float:
    return float(np.linalg.norm(got - ref, 1) / np.linalg.norm(ref, 1))


def mp_expm(a: np.ndarray) -> np.ndarray:
    with mpmath.workdps(40):
        e = mpmath.expm(mpmath.matrix(a.tolist()))
        return np.array([[float(e[i, j]) for j in range(a.shape[1])] for i in range(a.shape[0])])


# ---------------------------------------------------------------- expm
@pytest.mark.parametrize("n", [1, 2, 3, 5, 8, 13, 21])
def test_expm_random_against_scipy_over_every_pade_degree(n):
    # norms from 1e-3 to 1e2: the [3/3] .. [9/9] approximants and [13/13]
    # with 0 to ~6 squarings
    rng = np.random.default_rng(n)
    for scale in (1e-3, 1e-2, 0.1, 0.5, 1.5, 4.0, 20.0, 100.0):
        a = rng.standard_normal((n, n)) * scale / math.sqrt(n)
        ref = scipy.linalg.expm(a)
        assert rel_norm_err(expm(a), ref) < 1e-13 * max(1.0, scale)


@pytest.mark.parametrize("seed", range(4))
def test_expm_random_against_mpmath(seed):
    rng = np.random.default_rng(100 + seed)
    n = 6
    a = rng.standard_normal((n, n)) * 10 ** rng.uniform(-2, 1)
    # measured: about 1e-15 relative
    assert rel_norm_err(expm(a), mp_expm(a)) < 1e-13


def test_expm_stiff_against_mpmath():
    # eigenvalues from -1 to -1e4 (a stiff plant sampled slowly) on an
    # orthogonally similar, non-diagonal matrix; and a triangular stiff one
    rng = np.random.default_rng(7)
    q, _ = np.linalg.qr(rng.standard_normal((6, 6)))
    lam = -np.geomspace(1.0, 1e4, 6)
    a = q @ np.diag(lam) @ q.T * 1e-3
    assert rel_norm_err(expm(a), mp_expm(a)) < 1e-13
    t = np.triu(rng.standard_normal((5, 5)), 1) + np.diag(-np.geomspace(0.1, 30.0, 5))
    assert rel_norm_err(expm(t), mp_expm(t)) < 1e-13


@pytest.mark.parametrize("lam,size", [(0.0, 4), (-0.5, 3), (-3.0, 5)])
def test_expm_defective_jordan_block_closed_form(lam, size):
    # e^{(l I + N) t} = e^{l t} sum_k (N t)^k / k! (N nilpotent)
    t = 1.7
    nil = np.diag(np.ones(size - 1), 1)
    a = (lam * np.eye(size) + nil) * t
    ref = sum(np.linalg.matrix_power(nil * t, k) / math.factorial(k) for k in range(size))
    ref = math.exp(lam * t) * ref
    assert rel_norm_err(expm(a), ref) < 1e-13
    assert rel_norm_err(expm(a), mp_expm(a)) < 1e-13


def test_expm_defective_with_large_coupling_against_mpmath():
    # a double pole with a coupling 1e3 times its size (a non-normal block)
    a = np.array([[-2.0, 2e3, 0.0], [0.0, -2.0, 1.0], [0.0, 0.0, -0.1]]) * 0.3
    assert rel_norm_err(expm(a), mp_expm(a)) < 1e-13


def test_expm_rotation_block_closed_form():
    s, w, t = -0.3, 40.0, 0.9
    a = np.array([[s, w], [-w, s]]) * t
    ref = math.exp(s * t) * np.array([[math.cos(w * t), math.sin(w * t)],
                                      [-math.sin(w * t), math.cos(w * t)]])
    # 36 rad of rotation: the condition of e^A is about |A| = 36
    assert rel_norm_err(expm(a), ref) < 1e-13 * 40


def test_expm_van_loan_block_matrix_against_scipy():
    # the block matrix of the zero-order hold with its integral (Van Loan 1978)
    rng = np.random.default_rng(3)
    n = 8
    a = rng.standard_normal((n, n)) * 50.0
    m = np.zeros((2 * n + 1, 2 * n + 1))
    m[:n, :n] = a
    m[:n, n:2 * n] = np.eye(n)
    m[:n, 2 * n:] = rng.standard_normal((n, 1))
    for t in (1e-4, 1e-3, 1e-2):
        assert rel_norm_err(expm(m * t), scipy.linalg.expm(m * t)) < 1e-13


def test_expm_edge_cases():
    assert expm(np.zeros((0, 0))).shape == (0, 0)
    np.testing.assert_array_equal(expm(np.zeros((3, 3))), np.eye(3))
    assert expm(np.array([[2.0]]))[0, 0] == pytest.approx(math.exp(2.0), rel=1e-15)
    with pytest.raises(ValueError):
        expm(np.zeros((2, 3)))
    with pytest.raises(ValueError):
        expm(np.array([[np.nan]]))


# ----------------------------------------------------------- balancing
def test_balance_scaling_is_exact_and_balances_like_scipy():
    rng = np.random.default_rng(11)
    for n in (2, 4, 7, 12):
        a = rng.standard_normal((n, n))
        t = 2.0 ** rng.integers(-25, 25, n)
        a = a * t[None, :] / t[:, None]
        s = balance_scaling(a)
        # powers of 2: the similarity is exact, the eigenvalues untouched
        np.testing.assert_array_equal(s, 2.0 ** np.round(np.log2(s)))
        bal = a * s[None, :] / s[:, None]
        _, (s_ref, _) = scipy.linalg.matrix_balance(a, permute=False, separate=True)
        ref = a * s_ref[None, :] / s_ref[:, None]
        assert np.linalg.norm(bal) <= 2.0 * np.linalg.norm(ref)
        assert np.linalg.norm(bal) < 1e-3 * np.linalg.norm(a)


# ---------------------------------------------------------- SISO zeros
def qz_zeros(a, b, c, d, limit):
    n = a.shape[0]
    m = np.block([[a, b.reshape(n, 1)], [c.reshape(1, n), np.array([[d]])]])
    e = np.zeros((n + 1, n + 1))
    e[:n, :n] = np.eye(n)
    g = scipy.linalg.eigvals(m, e)
    return g[np.isfinite(g) & (np.abs(g) < limit)]


def companion(num_roots, den_roots):
    """Controllable canonical form of prod(s - z) / prod(s - p) (exact relative degree)."""
    den = np.real(np.poly(den_roots))
    num = np.real(np.poly(num_roots)) if len(num_roots) else np.array([1.0])
    n = den.size - 1
    a = np.zeros((n, n))
    a[0, :] = -den[1:]
    a[np.arange(1, n), np.arange(n - 1)] = 1.0
    b = np.zeros(n)
    b[0] = 1.0
    num = np.concatenate([np.zeros(n + 1 - num.size), num])
    c = num[1:] - num[0] * den[1:]
    return a, b, c, float(num[0])


@pytest.mark.parametrize("n", [1, 2, 3, 5, 8])
def test_siso_zeros_against_qz_and_closed_form_for_relative_degrees_0_to_3(n):
    # random real roots in [-3, -0.3] and [0.3, 3]; a random orthogonal
    # similarity (Q^T a Q, Q^T b, c Q) so that no entry is structurally zero
    rng = np.random.default_rng(20 + n)
    declined = 0
    for rd in range(0, min(n, 3) + 1):
        for _ in range(4):
            poles = rng.uniform(0.3, 3.0, n) * rng.choice([-1.0, 1.0], n)
            zeros = rng.uniform(0.3, 3.0, n - rd) * rng.choice([-1.0, 1.0], n - rd)
            a, b, c, d = companion(zeros, poles)
            q, _ = np.linalg.qr(rng.standard_normal((n, n)))
            a, b, c = q.T @ a @ q, q.T @ b, c @ q
            # balanced first, as the callers do (a diagonal similarity of the pencil)
            m = np.block([[a, b[:, None]], [c[None, :], np.array([[d]])]])
            t = balance_scaling(m)
            m = m * t[None, :] / t[:, None]
            a, b, c = m[:n, :n], m[:n, n], m[n, :n]
            radius = 1.0 + float(np.max(np.abs(poles)))
            got = siso_zeros(a, b, c, d, radius)
            if got is None:  # declined (a feedthrough in the delicate range)
                declined += 1
                continue
            assert got.size == n - rd
            ref = qz_zeros(a, b, c, d, 1e6 * radius)
            for x in zeros:
                # the companion form is ill-conditioned: compare with QZ's error
                qz_err = float(np.min(np.abs(ref - x))) if ref.size else 0.0
                assert np.min(np.abs(got - x)) <= max(1e-9, 10 * qz_err) * max(1.0, abs(x))
    assert declined <= 4 * (min(n, 3) + 1) // 2


def test_siso_zeros_against_qz_on_random_biproper_systems():
    rng = np.random.default_rng(5)
    for n in (1, 2, 4, 7, 12):
        a = rng.standard_normal((n, n))
        b = rng.standard_normal(n)
        c = rng.standard_normal(n)
        d = float(np.linalg.norm(b) * np.linalg.norm(c)) * (1.0 + rng.random())
        radius = 1.0 + float(np.max(np.abs(np.linalg.eigvals(a))))
        got = siso_zeros(a, b, c, d, radius)
        ref = qz_zeros(a, b, c, d, 1e8 * radius)
        assert got.size == ref.size == n
        for x in ref:
            assert np.min(np.abs(got - x)) <= 1e-12 * max(1.0, abs(x))


def test_siso_zeros_closed_form():
    # (s + 3)(s + 5) / ((s + 1)(s + 2)(s + 4)) in controllable canonical form
    den = np.poly([-1.0, -2.0, -4.0])
    num = np.poly([-3.0, -5.0])
    a = np.zeros((3, 3))
    a[0, :] = -den[1:]
    a[1, 0] = a[2, 1] = 1.0
    b = np.array([1.0, 0.0, 0.0])
    c = num.copy()
    got = np.sort(siso_zeros(a, b, c, 0.0, 5.0).real)
    np.testing.assert_allclose(got, [-5.0, -3.0], rtol=1e-13)
    # biproper: (s + 3)/(s + 1) = 1 + 2/(s + 1): zero at -3
    got = siso_zeros(np.array([[-1.0]]), np.array([1.0]), np.array([2.0]), 1.0, 2.0)
    np.testing.assert_allclose(got, [-3.0], rtol=1e-14)


def test_siso_zeros_declines_delicate_cases():
    a = np.diag([-1.0, -2.0])
    b = np.array([1.0, 1.0])
    c = np.array([1.0, 1.0])
    assert siso_zeros(a, b, c, 1e-6, 3.0) is None  # a tiny but real feedthrough
    assert siso_zeros(a, b, np.zeros(2), 0.0, 3.0) is None  # a zero block


# ------------------------------------- small feedthrough: the refined band
def mp_zeros(a, b, c, d) -> np.ndarray:
    """Zeros of ``c (xI - a)^-1 b + d`` (d != 0) at 50 digits: eigenvalues of the
    Schur complement ``a - b c / d`` formed and solved by mpmath from the given
    doubles (the exact zeros of the given realization)."""
    with mpmath.workdps(50):
        am = mpmath.matrix(a.tolist())
        bm = mpmath.matrix(b.tolist())
        cm = mpmath.matrix([c.tolist()])
        ev = mpmath.eig(am - bm * cm / mpmath.mpf(d), left=False, right=False)
        return np.array([complex(e) for e in ev])


def worst_match(got: np.ndarray, ref: np.ndarray, scale: float) -> float:
    """Largest |got - ref| / scale over the zeros, each matched to its nearest."""
    left = list(got)
    worst = 0.0
    for r in ref:
        k = int(np.argmin([abs(r - g) for g in left]))
        worst = max(worst, abs(left.pop(k) - r) / scale)
    return worst


@pytest.mark.parametrize("seed", range(6))
def test_siso_zeros_small_feedthrough_refined_against_mpmath_and_qz(seed):
    # |d| between SCHUR_REFINED_FEEDTHROUGH and SCHUR_MIN_FEEDTHROUGH times
    # ||b|| ||c|| / nu: the Schur complement amplifies rounding by up to 1000,
    # the refinement on the pencil must give QZ's accuracy back (mpmath reference)
    rng = np.random.default_rng(100 + seed)
    for n in (2, 3, 5, 8, 11):
        a = rng.standard_normal((n, n)) * 10.0 ** rng.uniform(0, 3)
        b = rng.standard_normal(n)
        c = rng.standard_normal(n)
        nb, nc = float(np.linalg.norm(b)), float(np.linalg.norm(c))
        radius = 1.0 + float(np.max(np.abs(np.linalg.eigvals(a))))
        size = max(radius, math.sqrt(float(np.vdot(a, a)) + nb * nb + nc * nc))
        d = float(10.0 ** rng.uniform(-2.9, -1.1)) * nb * nc / size * rng.choice([-1.0, 1.0])
        got = siso_zeros(a, b, c, d, radius)
        if got is None:  # a zero that does not settle goes to QZ: allowed, but rare
            continue
        ref = mp_zeros(a, b, c, d)
        qz = qz_zeros(a, b, c, d, 1e12 * radius)
        assert got.size == ref.size == qz.size == n
        # errors relative to the pencil's size (the backward error of QZ)
        err, qz_err = worst_match(got, ref, size), worst_match(qz, ref, size)
        assert err <= max(4.0 * qz_err, 1e-15), (n, err, qz_err)


def servo_plant_of_bench_project(index: int):
    """Plant ``index`` of the project of benchmarks/bench_vs_grid.py (the same
    random draws, seed 9): 10th order, four lightly damped pairs."""
    from ruleguard.models.lti import Factored

    rng = np.random.default_rng(9)
    wc = 2 * math.pi * 100.0
    for _ in range(index + 1):
        res_hz = np.sort(10 ** rng.uniform(math.log10(800.0), math.log10(4000.0), 4))
        res_damp = 10 ** rng.uniform(-1.7, -1.0, 4)
        anti_hz = res_hz * rng.uniform(0.85, 0.97, 4)
        anti_damp = res_damp * rng.uniform(0.5, 1.0, 4)
        slow = -float(rng.uniform(2.0, 20.0))
        fast = -float(rng.uniform(4000.0, 9000.0))
        rng.uniform(4.0, 8.0)  # the PI corner of that loop
    zeros = [complex(-z * 2 * math.pi * f, 2 * math.pi * f * math.sqrt(1 - z * z))
             for f, z in zip(anti_hz, anti_damp, strict=True)]
    poles = [complex(-z * 2 * math.pi * f, 2 * math.pi * f * math.sqrt(1 - z * z))
             for f, z in zip(res_hz, res_damp, strict=True)]
    zc = np.array(zeros + [z.conjugate() for z in zeros])
    pc = np.array(poles + [p.conjugate() for p in poles] + [slow, fast])
    shape = abs(np.prod(1j * wc - zc) / np.prod(1j * wc - pc))
    return Factored(zc, pc, 1.0 / shape)


def mp_pencil_zeros(pencil: np.ndarray) -> np.ndarray:
    """Finite zeros of the system pencil ``[[a, b], [c, d]]`` at 50 digits: the
    orthogonal deflation of [EV] (Householder, c -> first state) while ``d``
    vanishes, then the eigenvalues of the Schur complement, all in mpmath."""
    n = pencil.shape[0] - 1
    with mpmath.workdps(50):
        m = mpmath.matrix(pencil.tolist())
        a, b, c, d = m[:n, :n], m[:n, n], m[n:n + 1, :n], m[n, n]
        size = mpmath.mnorm(m, "f")
        while abs(d) <= mpmath.mpf(10) ** -40 * size and a.rows > 0:
            k = a.rows
            v = mpmath.matrix([c[0, j] for j in range(k)])
            v[0] += mpmath.sqrt(sum(x * x for x in v)) * (1 if v[0] >= 0 else -1)
            hh = mpmath.eye(k) - 2 * v * v.T / sum(x * x for x in v)
            ar, br = hh * a * hh, hh * b
            a, b, c, d = ar[1:, 1:], br[1:, 0], ar[0:1, 1:], br[0, 0]
        if a.rows == 0:
            return np.zeros(0, complex)
        ev = mpmath.eig(a - b * c / d, left=False, right=False)
        return np.array([complex(e) for e in ev])


@pytest.mark.parametrize("index, whole, fraction",
                         [(53, 1, 0.0), (165, 1, 0.0), (0, 1, 0.37), (7, 2, 0.5), (12, 0, 0.5)])
def test_sampled_plants_with_a_small_first_sample_need_no_qz(index, whole, fraction,
                                                              monkeypatch):
    # plants 53 and 165 of the benchmark project put the deflated feedthrough
    # (c b, about h^2/2 of the scale for relative degree 2) just below
    # SCHUR_MIN_FEEDTHROUGH, and so does a fractional delay for these plants
    # (the input reaches the output through the delay state): once the QZ
    # fallback of the build (and an import of scipy), now refined. The
    # discrete zeros agree with the 50-digit zeros of the same pencil.
    import ruleguard.models.discretize as disc
    from ruleguard.models import modal_hold as mh

    h = 1e-4
    plant = servo_plant_of_bench_project(index)
    modes = mh.modal_hold(plant, h, whole, fraction)
    pencil = modes.delta_pencil()
    ref = 1.0 + h * mp_pencil_zeros(pencil)
    scipy_calls = []
    real_eig = scipy.linalg.eig
    monkeypatch.setattr(scipy.linalg, "eig", lambda *x, **k: scipy_calls.append(1) or
                        real_eig(*x, **k))
    radius = float(np.max(np.abs(modes.lam_minus_one))) / h
    if fraction:
        radius = max(radius, 1.0 / h)
    zeros = disc._delta_pencil_zeros(pencil, h, radius)
    assert not scipy_calls
    assert zeros.size == ref.size == (9 if fraction == 0.0 else 10)
    assert worst_match(zeros, ref, 1.0) <= 1e-13  # z-plane zeros, |z| about 1
    # and the whole ZOH equivalent matches the modal sum on the unit circle
    zoh = disc.zoh_equivalent(plant, h, (whole + fraction) * h)
    w = np.geomspace(1.0, math.pi / h * 0.999, 300)
    np.testing.assert_allclose(zoh.response(w), modes.response(w), rtol=1e-10)


# ------------------------------------------------------------- import cost
_PROBE = """
import io, sys
from ruleguard.cli import run
code = run(["check", "--no-cache", "-q"], io.StringIO(), sys.stderr)
print(code, "scipy" in sys.modules)
"""


def test_cold_one_loop_check_imports_no_scipy(tmp_path):
    env = dict(os.environ)
    subprocess.run([sys.executable, "-m", "ruleguard", "init", "."], cwd=tmp_path, check=True,
                   capture_output=True, env=env)
    out = subprocess.run([sys.executable, "-c", _PROBE], cwd=tmp_path, capture_output=True,
                         text=True, env=env)
    assert out.stdout.split() == ["0", "False"], out.stdout + out.stderr


def test_balanced_matrices_are_recognised_without_the_loop(monkeypatch):
    # the quick test of the first pass must agree with the vectorised loop
    # itself (run by making the quick test always say "moves"): same scaling
    # bit for bit, for matrices that need balancing and for balanced ones
    import ruleguard.models.matrices as mat

    rng = np.random.default_rng(31)
    cases = []
    for _ in range(150):
        n = int(rng.integers(11, 25))
        a = rng.standard_normal((n, n)) * (rng.random((n, n)) < 0.7)
        cases.append(a * 10.0 ** rng.integers(-3, 4, size=(n, n)))
        cases.append(np.diag(rng.standard_normal(n)) + 0.3 * rng.standard_normal((n, n)))
    quick = [balance_scaling(a) for a in cases]
    monkeypatch.setattr(mat, "_first_step_moves", lambda sq: True)
    loop = [balance_scaling(a) for a in cases]
    assert all(x.tobytes() == y.tobytes() for x, y in zip(quick, loop, strict=True))
    assert sum(bool(np.all(x == 1.0)) for x in quick) >= 20  # balanced ones are among them
