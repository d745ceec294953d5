"""Dense matrix functions in numpy alone: exponential, balancing, SISO system zeros.

The model-building path of an ordinary loop (zero-order-hold equivalents,
discrete zeros, state-space conversions) needs a matrix exponential, a
diagonal balancing and the invariant zeros of a single-input single-output
realization. Importing ``scipy.linalg`` for them costs about 0.2 s, most of a
cold check; these routines use ``numpy`` only. :func:`siso_zeros` declines
(returns ``None``) in the rare numerically delicate cases, where the caller
uses the QZ algorithm of ``scipy.linalg`` instead.

References
----------
.. [H05] N. J. Higham, "The scaling and squaring method for the matrix
   exponential revisited", SIAM J. Matrix Anal. Appl. 26(4), 2005,
   pp. 1179-1193 (Algorithm 2.3, Table 2.3 and the coefficients of the
   [m/m] Pade approximants).
.. [PR] B. N. Parlett, C. Reinsch, "Balancing a matrix for calculation of
   eigenvalues and eigenvectors", Numer. Math. 13, 1969, pp. 293-304
   (the scaling loop of LAPACK xGEBAL).
.. [EV] A. Emami-Naeini, P. Van Dooren, "Computation of zeros of linear
   multivariable systems", Automatica 18(4), 1982, pp. 415-430 (orthogonal
   deflation of the system pencil, here in its single-input single-output
   form).
"""

from __future__ import annotations

import math

import numpy as np

# [H05] Table 2.3: the largest ||A||_1 for which the [m/m] Pade approximant
# has a backward error below the unit roundoff 2^-53.
_THETA = ((3, 1.495585217958292e-2), (5, 2.539398330063230e-1),
          (7, 9.504178996162932e-1), (9, 2.097847961257068e0))
_THETA13 = 5.371920351148152e0
#: :func:`siso_zeros` forms the Schur complement ``a - b c / d`` only when
#: ``|d| >= SCHUR_MIN_FEEDTHROUGH * ||b|| ||c|| / nu`` (rounding amplified
#: at most tenfold); below, the caller's QZ algorithm is used.
SCHUR_MIN_FEEDTHROUGH = 0.1
#: Zeros smaller than this fraction of the terms of the Schur complement
#: (``max(||a||_F, ||b|| ||c|| / |d|)``) are refined on the pencil: their
#: absolute error is the rounding of those terms.
REFINE_BELOW = 1e-2
#: Between ``SCHUR_REFINED_FEEDTHROUGH * ||b|| ||c|| / nu`` and the bound
#: above, the Schur complement is formed and every zero is refined on the
#: pencil (``_refined_schur_zeros``); below it the caller's QZ is used.
SCHUR_REFINED_FEEDTHROUGH = 1e-3
#: A refined zero has settled when its last Aberth step is below this
#: fraction of its modulus and of its distance to the other zeros.
REFINED_SETTLE = 1e-9


def real_eigvals(a: np.ndarray) -> np.ndarray:
    """Eigenvalues of a real square matrix as a complex array: ``numpy.linalg.eigvals``.

    The same LAPACK routine (``dgeev`` through numpy's generalized ufunc)
    and the same numbers as ``numpy.linalg.eigvals(a).astype(complex)``,
    without its per-call checks and conversions (about half of its time on
    a 10 x 10 matrix): the finiteness test is one sum, and a matrix that
    fails it (or a numpy without that ufunc) goes through
    ``numpy.linalg.eigvals`` itself, which raises as usual.

    References
    ----------
    E. Anderson et al., LAPACK Users' Guide, 3rd ed., SIAM, 1999 (xGEEV:
    Hessenberg reduction and the shifted QR algorithm).
    """
    if (_EIG_UFUNC is None or a.dtype != _FLOAT or a.ndim != 2 or a.shape[0] != a.shape[1]
            or not math.isfinite(float(a.sum()))):
        return np.linalg.eigvals(a).astype(complex)
    with np.errstate(**_EIG_ERRSTATE):
        w = _EIG_UFUNC(a, signature="d->D")
    if not w.imag.any():  # numpy.linalg.eigvals returns the real parts then
        return w.real.astype(complex)
    return w


def _eig_ufunc():
    """numpy's eigenvalue ufunc and the error state ``numpy.linalg.eigvals`` runs it in."""
    try:
        from numpy.linalg import _linalg, _umath_linalg

        raise_error = _linalg._raise_linalgerror_eigenvalues_nonconvergence
        ufunc = _umath_linalg.eigvals
    except (ImportError, AttributeError):  # pragma: no cover - another numpy layout
        return None, {}
    return ufunc, {"call": raise_error, "invalid": "call", "over": "ignore",
                   "divide": "ignore", "under": "ignore"}


_FLOAT = np.dtype(float)
_EIG_UFUNC, _EIG_ERRSTATE = _eig_ufunc()

# [H05] coefficients b_0, ..., b_m of the [m/m] Pade numerator p_m(x)
_PADE = {
    3: (120.0, 60.0, 12.0, 1.0),
    5: (30240.0, 15120.0, 3360.0, 420.0, 30.0, 1.0),
    7: (17297280.0, 8648640.0, 1995840.0, 277200.0, 25200.0, 1512.0, 56.0, 1.0),
    9: (17643225600.0, 8821612800.0, 2075673600.0, 302702400.0, 30270240.0,
        2162160.0, 110880.0, 3960.0, 90.0, 1.0),
    13: (64764752532480000.0, 32382376266240000.0, 7771770303897600.0,
         1187353796428800.0, 129060195264000.0, 10559470521600.0,
         670442572800.0, 33522128640.0, 1323241920.0, 40840800.0, 960960.0,
         16380.0, 182.0, 1.0),
}


def expm(a: np.ndarray) -> np.ndarray:
    """Matrix exponential ``e^A`` by scaling and squaring ([H05] Algorithm 2.3).

    With ``||A||_1 <= theta_m`` for ``m`` in 3, 5, 7, 9 the [m/m] Pade
    approximant ``r_m(A) = q_m(A)^-1 p_m(A)`` is used directly; otherwise
    ``A`` is scaled by ``2^-s`` so that ``||2^-s A||_1 <= theta_13``, the
    [13/13] approximant is formed and squared ``s`` times. The thresholds
    ``theta_m`` bound the backward error by the unit roundoff, so the result
    is as accurate as the conditioning of ``e^A`` allows.

    Parameters
    ----------
    a:
        Real or complex square matrix.

    Returns
    -------
    numpy.ndarray
        ``e^A``, same dtype kind as ``a`` (float or complex).
    """
    a = np.asarray(a)
    if a.dtype.kind not in "fc":
        a = a.astype(float)
    n = a.shape[0]
    if a.ndim != 2 or a.shape[1] != n:
        raise ValueError(f"expm needs a square matrix, got shape {a.shape}")
    if n == 0:
        return np.zeros((0, 0), dtype=a.dtype)
    if not np.all(np.isfinite(a)):
        raise ValueError("expm needs a finite matrix")
    norm = float(np.max(np.sum(np.abs(a), axis=0)))
    ident = np.eye(n, dtype=a.dtype)
    for m, theta in _THETA:
        if norm <= theta:
            return _pade(a, m, ident)
    s = max(0, int(math.ceil(math.log2(norm / _THETA13))))
    x = _pade(a * (2.0 ** -s), 13, ident)
    for _ in range(s):
        x = x @ x
    return x


def _pade(a: np.ndarray, m: int, ident: np.ndarray) -> np.ndarray:
    """The [m/m] Pade approximant of ``e^A``: solve ``(V - U) X = V + U`` ([H05] (2.3))."""
    b = _PADE[m]
    a2 = a @ a
    if m == 13:
        a4 = a2 @ a2
        a6 = a4 @ a2
        u = a @ (a6 @ (b[13] * a6 + b[11] * a4 + b[9] * a2)
                 + b[7] * a6 + b[5] * a4 + b[3] * a2 + b[1] * ident)
        v = (a6 @ (b[12] * a6 + b[10] * a4 + b[8] * a2)
             + b[6] * a6 + b[4] * a4 + b[2] * a2 + b[0] * ident)
    else:
        powers = [ident, a2]
        for _ in range(2, m // 2 + 1):
            powers.append(powers[-1] @ a2)
        u = a @ sum(b[2 * k + 1] * powers[k] for k in range(m // 2 + 1))
        v = sum(b[2 * k] * powers[k] for k in range(m // 2 + 1))
    return np.linalg.solve(v - u, v + u)


def balance_scaling(a: np.ndarray) -> np.ndarray:
    """Diagonal ``t`` (powers of 2) such that ``diag(t)^-1 A diag(t)`` is balanced.

    The scaling of Parlett & Reinsch ([PR], as in LAPACK xGEBAL without
    permutations); up to order ``_SMALL_BALANCE`` row by row as there, above
    it in vectorised form: every row and column ``i`` whose
    2-norms (off the diagonal) differ is scaled at once by the power of 2
    closest to equalising them, when that reduces ``||row|| + ||column||`` by
    5 %; when such a simultaneous step would increase the Frobenius norm,
    only the single most profitable scaling is taken. Powers of 2 make the
    similarity exact in floating point.

    Returns
    -------
    numpy.ndarray
        The scale vector ``t`` (``A_balanced = A * t[None, :] / t[:, None]``).
    """
    a = np.array(a, dtype=float)
    n = a.shape[0]
    t = np.ones(n)
    if n < 2:
        return t
    sq = a * a
    np.fill_diagonal(sq, 0.0)
    if n <= _SMALL_BALANCE:
        return np.array(_balance_small(sq.tolist()))
    if not _first_step_moves(sq):
        return t  # balanced already (the first pass of the loop below would stop)
    for _ in range(60):
        col = sq.sum(axis=0)
        row = sq.sum(axis=1)
        live = (col > 0.0) & (row > 0.0)
        if not np.any(live):
            break
        # the power of 2 nearest to (r / c)^(1/4): equal row and column 2-norms
        with np.errstate(divide="ignore", invalid="ignore"):
            k = np.where(live, np.round(0.25 * np.log2(row / col)), 0.0)
            f = np.exp2(k)
            c = np.sqrt(col)
            r = np.sqrt(row)
            gain = c * f + r / f < 0.95 * (c + r)
        # Parlett-Reinsch scale one index at a time; here every index with a
        # gain is scaled at once, and when that step overshoots (the total
        # grows) only the single best one is taken (below)
        move = live & gain & (k != 0.0) & (np.abs(np.log2(t) + k) < 490)
        if not np.any(move):
            break
        f = np.where(move, f, 1.0)
        new = sq * (f * f)[None, :] / (f * f)[:, None]
        if np.sqrt(new.sum()) > np.sqrt(sq.sum()):
            # simultaneous steps overshoot: take the single best one
            i = int(np.argmax(np.where(move, (c + r) - (c * f + r / f), -np.inf)))
            f = np.ones(n)
            f[i] = np.exp2(k[i])
            new = sq * (f * f)[None, :] / (f * f)[:, None]
        sq = new
        t *= f
    return t


def _first_step_moves(sq: np.ndarray) -> bool:
    """Whether the first pass of the vectorised loop of :func:`balance_scaling` scales anything.

    The same test on Python floats (the sums and ``log2`` by numpy as there;
    rounding half to even, exact powers of two, correctly rounded square
    roots), so that a balanced matrix costs a handful of numpy calls.
    """
    col = sq.sum(axis=0)
    row = sq.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        logs = np.log2(row / col).tolist()
    for c2, r2, lg in zip(col.tolist(), row.tolist(), logs, strict=True):
        if not (c2 > 0.0 and r2 > 0.0):
            continue
        k = round(0.25 * lg)
        if k == 0 or not abs(k) < 490:  # t = 1 before the first pass: log2(t) = 0
            continue
        f = math.ldexp(1.0, k)
        c = math.sqrt(c2)
        r = math.sqrt(r2)
        if c * f + r / f < 0.95 * (c + r):
            return True
    return False


#: Up to this order :func:`balance_scaling` runs the sequential loop of
#: Parlett & Reinsch on Python floats (cheaper than numpy calls there).
_SMALL_BALANCE = 10


def _balance_small(sq: list[list[float]]) -> list[float]:
    """The sequential Parlett-Reinsch loop on squared off-diagonal entries."""
    n = len(sq)
    t = [1.0] * n
    for _ in range(100):
        changed = False
        for i in range(n):
            row_i = sq[i]
            c2 = 0.0
            for j in range(n):
                c2 += sq[j][i]
            r2 = sum(row_i)
            if c2 == 0.0 or r2 == 0.0:
                continue
            c = math.sqrt(c2)
            r = math.sqrt(r2)
            s = c + r
            f = 1.0
            while c < 0.5 * r:
                f *= 2.0
                c *= 2.0
                r *= 0.5
            while c >= 2.0 * r:
                f *= 0.5
                c *= 0.5
                r *= 2.0
            if c + r >= 0.95 * s or not 1e-150 < t[i] * f < 1e150:
                continue
            changed = True
            t[i] *= f
            f2 = f * f
            for j in range(n):
                sq[j][i] *= f2
                row_i[j] /= f2
        if not changed:
            break
    return t


def siso_zeros(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: float,
               radius: float) -> np.ndarray | None:
    """Finite invariant zeros of ``c (xI - a)^-1 b + d``, or ``None`` (use QZ instead).

    The zeros are the finite eigenvalues of the pencil
    ``([[a, b], [c, d]], [[I, 0], [0, 0]])``. The orthogonal deflation of
    [EV] in its single-input single-output form removes its infinite
    eigenvalues one by one: while ``d`` is zero, a Householder reflection
    ``H`` (``c H = gamma e_1``) takes the output to the first state; the
    first row and column of the reflected pencil then hold no ``x`` and the
    pencil of the system ``(a~[1:, 1:], b~[1:], a~[0, 1:], b~[0])``
    (``a~ = H a H``, ``b~ = H b``) has the same finite eigenvalues with one
    state less (the largest entry of ``c`` is permuted to the front first,
    so that an output of one state is deflated without rounding). Once ``d``
    is not zero the zeros are the eigenvalues of the
    Schur complement ``a - b c / d``.

    With ``nu`` the larger of ``radius`` and the Frobenius norm of the
    current pencil, ``d`` counts as zero below ``1e-14 ||b|| ||c|| / nu``
    (the next deflation step) and the Schur complement is formed above
    ``SCHUR_MIN_FEEDTHROUGH ||b|| ||c|| / nu``. Down to
    ``SCHUR_REFINED_FEEDTHROUGH ||b|| ||c|| / nu`` it is formed as well and
    every zero is then refined on the pencil (the rounding it amplifies is
    undone there; a zero that does not settle leaves the problem to QZ). In
    between, and when ``b`` or ``c`` vanishes (a zero block), ``None`` is
    returned. The sampled plants of ordinary loops (relative degree 1 after
    sampling) stay far inside the first bound (``||b|| ||c|| / (|d| radius)``
    below 0.4 for every variant of the demo project); a plant of relative
    degree 2 whose first sample ``c b`` is small (about ``h^2/2`` of its
    scale) may fall in the refined band (2 of the 300 loops of
    ``benchmarks/bench_vs_grid.py``).

    Parameters
    ----------
    a, b, c, d:
        The realization (n x n, n x 1, 1 x n, scalar), well scaled
        (balanced) for best accuracy.
    radius:
        The scale of the problem (above the moduli of the poles): a lower
        bound of ``nu`` in the tolerances for ``d``.

    Returns
    -------
    numpy.ndarray or None
        The finite zeros (complex), ``None`` when the problem is left to QZ.
    """
    a = np.array(a, dtype=float)
    b = np.array(b, dtype=float).reshape(-1)
    c = np.array(c, dtype=float).reshape(-1)
    d = float(d)
    radius = float(radius)
    if not radius > 0.0:
        return None
    start = (a, b, c, d)  # the pencil, formed only when small zeros need refining
    while True:
        n = a.shape[0]
        nb2 = float(b @ b)
        nc2 = float(c @ c)
        na2 = float(np.vdot(a, a))
        nb = math.sqrt(nb2)
        nc = math.sqrt(nc2)
        # the size of this stage's pencil: the backward error of QZ is eps times it
        size = max(radius, math.sqrt(na2 + nb2 + nc2 + d * d))
        scale = nb * nc / size
        if d == 0.0 and scale == 0.0:
            return None  # a zero block (or no input): QZ reports what is left
        if abs(d) >= SCHUR_MIN_FEEDTHROUGH * scale:
            if n == 0:
                return np.zeros(0, complex)
            if n == 1:
                roots = np.array([a[0, 0] - b[0] / d * c[0]], dtype=complex)
            else:
                roots = real_eigvals(a - np.outer(b / d, c))
            # roots much smaller than the terms of the Schur complement hold
            # their absolute accuracy only: refine them on the pencil
            terms = max(math.sqrt(na2), nb * nc / abs(d))
            small = np.abs(roots) < REFINE_BELOW * terms
            if small.any():
                roots[small] = _refine_zeros(_pencil(*start), roots, small)
            return roots
        if abs(d) >= SCHUR_REFINED_FEEDTHROUGH * scale and n:
            # a small feedthrough: the Schur complement amplifies rounding by
            # up to 1 / SCHUR_REFINED_FEEDTHROUGH, so every zero is refined on
            # the pencil (backward stable), or the problem goes to QZ
            return _refined_schur_zeros(_pencil(*start), a, b, c, d)
        if abs(d) > 1e-14 * scale or nc == 0.0 or n == 0:
            return None
        # the largest output weight first (a symmetric permutation): the
        # reflection below then mixes the states least, and an output that
        # reads one state alone is taken over exactly
        weights = [abs(x) for x in c.tolist()]
        k = weights.index(max(weights))  # the first largest, as numpy.argmax
        if k:
            order = np.array([k, *range(k), *range(k + 1, n)])
            a, b, c = a[order[:, None], order], b[order], c[order]  # C-contiguous, as a is
        # Householder v with (I - 2 v v^T / v^T v) c^T = -sign(c_0) ||c|| e_1
        v = c.copy()
        v[0] += math.copysign(nc, c[0])
        beta = 2.0 / float(v @ v)
        # a~ = H a H, b~ = H b
        av = a @ v
        a = a - beta * (av[:, None] * v[None, :])  # np.outer, without its call overhead
        va = v @ a
        a = a - beta * (v[:, None] * va[None, :])
        b = b - beta * float(v @ b) * v
        a, b, c, d = a[1:, 1:], b[1:], a[0, 1:], float(b[0])


def _refined_schur_zeros(pencil: np.ndarray, a: np.ndarray, b: np.ndarray, c: np.ndarray,
                         d: float) -> np.ndarray | None:
    """Zeros of a stage with a small feedthrough: Schur complement, then Aberth on the pencil.

    The eigenvalues of ``a - b c / d`` carry an absolute error of about
    ``eps ||b|| ||c|| / |d|``, at most ``1 / SCHUR_REFINED_FEEDTHROUGH`` times
    the rounding of the pencil itself. From there every zero is refined on
    the original pencil (:func:`_refine_zeros`, cubically convergent, each
    evaluation backward stable), so that the zeros reached are those of a
    pencil within rounding of the given one, as with QZ. ``None`` (leave it
    to QZ) when a zero does not settle: a refinement step refused, or the
    last step larger than ``REFINED_SETTLE`` of the zero's modulus or of its
    distance to the others.
    """
    n = a.shape[0]
    if n == 1:
        roots = np.array([a[0, 0] - b[0] / d * c[0]], dtype=complex)
    else:
        roots = real_eigvals(a - np.outer(b / d, c))
    every = np.ones(roots.size, dtype=bool)
    refined, last, ok = _refine_zeros(pencil, roots, every, steps=3, report=True)
    if not ok:
        return None
    gaps = np.abs(refined[:, None] - refined[None, :])
    np.fill_diagonal(gaps, np.inf)
    near = np.minimum(np.abs(refined), np.min(gaps, axis=1, initial=np.inf))
    if not np.all(last <= REFINED_SETTLE * near):
        return None
    return refined


def _pencil(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: float) -> np.ndarray:
    """``[[a, b], [c, d]]``."""
    n = a.shape[0]
    pencil = np.empty((n + 1, n + 1))
    pencil[:n, :n] = a
    pencil[:n, n] = b
    pencil[n, :n] = c
    pencil[n, n] = d
    return pencil


def _refine_zeros(pencil: np.ndarray, roots: np.ndarray, which: np.ndarray,
                  steps: int = 2, report: bool = False):
    """Aberth-Ehrlich refinement of ``roots[which]``, eigenvalues of ``(M, diag(I, 0))``.

    ``det(M - x E)`` is a polynomial whose roots are exactly the finite
    eigenvalues, with logarithmic derivative
    ``f'/f (x) = -trace((M - x E)^-1 E)``. The step
    ``x_k <- x_k - 1 / (f'/f (x_k) - sum_{j != k} 1 / (x_k - x_j))``
    (O. Aberth, "Iteration methods for finding all zeros of a polynomial
    simultaneously", Math. Comp. 27(122), 1973) converges cubically to
    simple roots, and the other approximations keep each one from jumping
    to a neighbour. Evaluated through an LU factorization of ``M - x E``
    (backward stable), the roots reached are those of a pencil within
    rounding of ``M``, whatever the cancellation in the Schur complement the
    start came from: a small zero of a pencil with a large norm gains its
    relative digits back. A step that would move a root by more than a
    thousandth of its modulus or of its distance to the others is not taken
    (the start is never that far off unless roots are multiple, where the
    refinement gains nothing).
    """
    n = pencil.shape[0] - 1
    others = roots[~which]
    x = roots[which].astype(complex)
    e = np.zeros((n + 1, n + 1))
    e[:n, :n] = np.eye(n)
    last = np.full(x.size, np.inf)
    settled = True
    for _ in range(steps):
        mats = pencil[None, :, :] - x[:, None, None] * e[None, :, :]
        try:
            inv = np.linalg.inv(mats)
        except np.linalg.LinAlgError:
            last[:] = 0.0  # a root exact to working precision
            break
        with np.errstate(all="ignore"):
            logd = -np.trace(inv[:, :n, :n], axis1=1, axis2=2)
            gaps = x[:, None] - x[None, :]
            np.fill_diagonal(gaps, np.inf)
            far = x[:, None] - others[None, :]
            step = 1.0 / (logd - np.sum(1.0 / gaps, axis=1) - np.sum(1.0 / far, axis=1))
        near = np.minimum(np.min(np.abs(gaps), axis=1, initial=np.inf),
                          np.min(np.abs(far), axis=1, initial=np.inf))
        limit = 1e-3 * np.minimum(near, np.abs(x))
        size = np.abs(step)
        ok = np.isfinite(step) & (size <= limit)
        if report:
            settled = bool(np.all(ok | (size == 0.0)))
            last = np.where(ok | (size == 0.0), size, np.inf)
        if not np.any(ok):
            break
        x = x - np.where(ok, step, 0.0)
    if report:
        return x, last, settled
    return x
