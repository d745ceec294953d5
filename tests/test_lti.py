"""Factored blocks (ruleguard.models.lti) against independent computations."""

import numpy as np
import pytest
import scipy.signal

from ruleguard.models.lti import Factored, MeasuredResponse, StateSpace, factored_to_state_space


def _random_block(rng, order, discrete=False):
    n_pairs = order // 2
    poles = list(rng.uniform(-5, -0.1, order - 2 * n_pairs))
    for _ in range(n_pairs):
        p = complex(rng.uniform(-3, -0.05), rng.uniform(0.5, 20))
        poles += [p, p.conjugate()]
    zeros = list(rng.uniform(-8, 8, max(order - 2, 0)))
    if discrete:
        poles = [0.9 * p / (abs(p) + 1.0) for p in poles]
        zeros = [z / (abs(z) + 1.0) for z in zeros]
    return np.array(zeros, complex), np.array(poles, complex), float(rng.uniform(0.5, 3.0))


@pytest.mark.parametrize("seed", range(5))
def test_continuous_response_matches_scipy_freqresp(seed):
    # Independent computation: scipy.signal.freqresp of the same factored system.
    rng = np.random.default_rng(seed)
    z, p, k = _random_block(rng, 6)
    w = np.logspace(-2, 2, 200)
    _, expected = scipy.signal.freqresp(scipy.signal.ZerosPolesGain(z, p, k), w)
    got = Factored(z, p, k).response(w)
    np.testing.assert_allclose(got, expected, rtol=1e-10)


@pytest.mark.parametrize("seed", range(5))
def test_discrete_response_matches_scipy_freqz_zpk(seed):
    # Independent computation: scipy.signal.freqz_zpk evaluates at exp(j w h).
    rng = np.random.default_rng(100 + seed)
    z, p, k = _random_block(rng, 6, discrete=True)
    h = 1e-3
    w = np.linspace(1.0, np.pi / h, 300)
    _, expected = scipy.signal.freqz_zpk(z, p, k, worN=w * h)
    got = Factored(z, p, k, sample_time_s=h).response(w)
    np.testing.assert_allclose(got, expected, rtol=1e-10)


def test_delay_is_exact():
    # exp(-j w tau) has unit modulus and phase -w tau (definition of a delay).
    block = Factored([], [-1.0], 1.0, delay_s=0.3)
    w = np.array([0.5, 2.0, 10.0])
    ratio = block.response(w) / Factored([], [-1.0], 1.0).response(w)
    np.testing.assert_allclose(ratio, np.exp(-0.3j * w), rtol=1e-14)


def test_high_order_does_not_overflow():
    # 120 poles at -1e4 and 120 zeros at -2e4: |H(j w)| -> 2**120 * k for w >> 2e4.
    block = Factored(np.full(120, -2e4), np.full(120, -1e4), 1.0)
    value = block.response(np.array([1e9]))[0]
    assert np.isfinite(value)
    assert abs(value) == pytest.approx(1.0, rel=1e-6)


def test_unstable_and_boundary_counts():
    block = Factored([], [0.0, 0.0, 2.0, -1.0, 3j, -3j, 1e-15 + 5j, 1e-15 - 5j], 1.0)
    assert block.unstable_pole_count() == 1
    assert block.boundary_pole_frequencies() == [(0.0, 2), (3.0, 1), (5.0, 1)]
    zblock = Factored([], [1.0, 1.2, 0.5, -1.0], 1.0, sample_time_s=0.01)
    assert zblock.unstable_pole_count() == 1
    freqs = zblock.boundary_pole_frequencies()
    assert freqs[0] == (0.0, 1)
    assert freqs[1][0] == pytest.approx(np.pi / 0.01)


@pytest.mark.parametrize("seed", range(5))
def test_state_space_round_trip(seed):
    # A realization of the block must have the same response (scipy.signal.freqresp
    # of the realization's matrices is the independent evaluation).
    rng = np.random.default_rng(200 + seed)
    z, p, k = _random_block(rng, 7)
    block = Factored(z, p, k)
    ss = factored_to_state_space(block)
    w = np.logspace(-2, 2, 100)
    _, expected = scipy.signal.freqresp(scipy.signal.StateSpace(ss.a, ss.b, ss.c, ss.d), w)
    np.testing.assert_allclose(block.response(w), expected, rtol=1e-8)
    back = ss.to_factored()
    np.testing.assert_allclose(back.response(w), expected, rtol=1e-7)
    assert back.poles.size == p.size


def test_state_space_to_factored_matches_scipy_ss2zpk():
    a = [[0.0, 1.0], [-25.0, -0.4]]
    b = [[0.0], [1.0]]
    c = [[25.0, 3.0]]
    d = [[0.0]]
    zeros, poles, gain = scipy.signal.ss2zpk(a, b, c, d)
    got = StateSpace(a, b, c, d).to_factored()
    np.testing.assert_allclose(np.sort_complex(got.poles), np.sort_complex(poles), rtol=1e-12)
    np.testing.assert_allclose(np.sort_complex(got.zeros), np.sort_complex(zeros), rtol=1e-10)
    assert got.gain == pytest.approx(gain, rel=1e-12)


def test_measured_response_interpolates_in_log_frequency():
    # Linear in log-frequency on dB and phase (FORMATS.md section 2): halfway in
    # log f between 1 and 100 rad/s (w = 10) gives the mean of the dB values.
    data = MeasuredResponse([1.0, 100.0], [0.0, -40.0], [-90.0, -180.0], integrators=1)
    value = data.response(np.array([10.0]))[0]
    assert 20 * np.log10(abs(value)) == pytest.approx(-20.0)
    assert np.rad2deg(np.angle(value)) == pytest.approx(-135.0)
    # Below the data: c / s**1, so 20 dB per decade upwards.
    low = data.response(np.array([0.1]))[0]
    assert 20 * np.log10(abs(low)) == pytest.approx(20.0)
    assert np.isnan(data.response(np.array([1000.0]))[0])


def test_state_space_delay_kept_in_factored_form():
    # 1/(s+2) realised as x' = -2x + u, y = x, with a 0.1 s delay.
    block = StateSpace([[-2.0]], [[1.0]], [[1.0]], [[0.0]], delay_s=0.1).to_factored()
    assert block.gain == pytest.approx(1.0)
    assert block.delay_s == 0.1
    np.testing.assert_allclose(block.poles, [-2.0])


def test_large_evaluations_multiply_the_factors_in_order_bit_for_bit():
    # above the broadcast limit the zero/pole ratios are stacked and reduced
    # over the first axis: the reference is the product written out factor
    # by factor (gain, then each zero/pole ratio, then unpaired factors)
    rng = np.random.default_rng(8)
    for nz, npl in ((9, 11), (11, 9), (3, 3), (0, 5), (6, 0)):
        zeros = rng.standard_normal(nz) + 1j * rng.standard_normal(nz)
        poles = rng.standard_normal(npl) + 1j * rng.standard_normal(npl)
        block = Factored(zeros, poles, 1.7, 0.0, 1e-3)
        x = np.exp(1j * rng.uniform(0, np.pi, (40, 30)))
        ref = np.full(x.shape, 1.7, dtype=complex)
        for i in range(max(nz, npl)):
            if i < nz and i < npl:
                ref = ref * ((x - zeros[i]) / (x - poles[i]))
            elif i < nz:
                ref = ref * (x - zeros[i])
            else:
                ref = ref / (x - poles[i])
        got = block.evaluate(x)
        assert got.shape == x.shape and got.tobytes() == ref.tobytes()
