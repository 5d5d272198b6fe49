"""The B.3.2.1 deflection check: the standard's allowable (from memory; worked values of the shared domain notes,
section 6) and exact identities of the second difference."""
import math

import numpy as np
import pytest

from chimeline.config import TankConfig
from chimeline.evaluate import tank_data
from chimeline.evaluate.deflection import allowable, chord_deflection, curvature_limit, second_difference_curvature

FT = 0.3048  # international foot, exact
PSI = 6894.757293168  # Pa per psi (NIST SP 811)


def test_smax_worked_values_us_units():
    # L = 20 ft, Y = 30 ksi, E = 29e6 psi, H = 40 ft -> 0.0569 ft (0.68 in)
    s = allowable(20 * FT, 30e3 * PSI, 29e6 * PSI, 40 * FT) / FT
    assert s == pytest.approx(0.0569, abs=0.0001)
    # D = 100 ft, N = 10, H = 40 ft, Y = 36 ksi -> 0.1685 ft (2.02 in)
    L = math.pi * 100 / 10
    assert L == pytest.approx(31.416, abs=0.001)
    s = allowable(L * FT, 36e3 * PSI, 29e6 * PSI, 40 * FT) / FT
    assert s == pytest.approx(0.1685, abs=0.0002)


def test_smax_worked_value_si():
    # D = 30 m, N = 10 (L = 9.425 m), H = 12 m, Y = 250 MPa, E = 200 GPa -> 50.9 mm (derived from the formula)
    s = allowable(math.pi * 30 / 10, 250e6, 200e9, 12.0)
    assert s * 1000 == pytest.approx(50.9, abs=0.1)


def test_tank_data_parses_units():
    t = tank_data(TankConfig(diameter="100 ft", shell_height="40 ft", yield_strength="36 ksi",
                             youngs_modulus="29e6 psi"), "m")
    assert t.diameter == pytest.approx(30.48)
    assert t.yield_strength == pytest.approx(36e3 * PSI, rel=1e-9)
    assert t.youngs_modulus == pytest.approx(29e6 * PSI, rel=1e-9)


def test_equal_spacing_deflection_is_minus_half_kappa_L2():
    kappa, L = 0.002, 3.0
    s = np.arange(-5, 6) * L
    u = kappa * s ** 2 / 2
    S, _, L1, L2 = chord_deflection(s, u, circumference=1e9)
    assert S[5] == pytest.approx(-kappa * L ** 2 / 2, rel=1e-12)
    # unequal spacing: the chord form gives -kappa L1 L2 / 2
    s2 = np.array([-2.0, 0.0, 5.0])
    u2 = kappa * s2 ** 2 / 2
    S2, _, a, b = chord_deflection(s2, u2, circumference=1e9)
    assert S2[1] == pytest.approx(-kappa * 2.0 * 5.0 / 2, rel=1e-12)
    assert second_difference_curvature(s2, u2, 1e9)[1] == pytest.approx(kappa, rel=1e-12)


@pytest.mark.parametrize("n_mode,N", [(2, 8), (3, 12), (4, 16), (1, 8)])
def test_pure_mode_deflection_factor(n_mode, N):
    """A mode n sampled at N equal steps gives S_i = (1 - cos n Delta) U_i (tilt n = 1 leaks 29 % at N = 8)."""
    th = np.arange(N) * 2 * np.pi / N
    R = 10.0
    U = 0.01 * np.cos(n_mode * th + 0.3)
    S, _, _, _ = chord_deflection(R * th, U, circumference=2 * np.pi * R)
    np.testing.assert_allclose(S, (1 - np.cos(n_mode * 2 * np.pi / N)) * U, atol=1e-15)
    if n_mode == 1 and N == 8:
        assert 1 - np.cos(2 * np.pi / 8) == pytest.approx(0.29, abs=0.005)


def test_noise_variance_of_deflection_is_1_5_sigma2():
    """Independent noise sigma gives Var(S_i) = 1.5 sigma^2 (derived): empirically over many surveys and in the
    1-sigma the check reports."""
    rng = np.random.default_rng(3)
    sig = 0.002
    U = rng.normal(0, sig, (20000, 12))
    s = np.arange(12.0)
    S = np.array([chord_deflection(s, u, circumference=12.0)[0] for u in U])
    assert S.var() == pytest.approx(1.5 * sig ** 2, rel=0.02)
    _, sd, _, _ = chord_deflection(s, U[0], np.full(12, sig), circumference=12.0)
    assert sd[0] == pytest.approx(math.sqrt(1.5) * sig, rel=1e-12)


@pytest.mark.parametrize("L_over_lambda", [0.05, 0.2, 0.4])
def test_second_difference_bias_on_a_sinusoid(L_over_lambda):
    """Second-difference curvature / true curvature = 2 (1 - cos x) / x^2 with x = 2 pi L / lambda."""
    lam = 20.0
    L = L_over_lambda * lam
    s = np.array([-L, 0.0, L])
    u = np.cos(2 * np.pi * s / lam)
    k_est = second_difference_curvature(s, u, 1e9)[1]
    k_true = -(2 * np.pi / lam) ** 2
    x = 2 * np.pi * L / lam
    assert k_est / k_true == pytest.approx(2 * (1 - np.cos(x)) / x ** 2, rel=1e-12)


def test_curvature_limit_value():
    assert curvature_limit(250e6, 200e9, 12.0) == pytest.approx(11 * 250 / 200e3 / 12, rel=1e-12)
