"""Trigonometric (Fourier) regression of the junction profile and its tests (statsmodels WLS).

z(theta) = a0 + sum_k (a_k cos k theta + b_k sin k theta), by weighted least squares with weights
1/std_error^2 when the input carries them. k = 0 is uniform settlement, k = 1 rigid tilt, k >= 2 the
out-of-plane modes. The order K is chosen by a stated criterion and capped so that 2K + 1 < N and the
shortest wavelength 2 pi R / K stays above ``min_wavelength``.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from .results import FourierFit, TestResult


def design(theta_rad: np.ndarray, order: int) -> np.ndarray:
    """Columns 1, cos t, sin t, cos 2t, sin 2t, ... (n, 2 order + 1)."""
    cols = [np.ones_like(theta_rad)]
    for k in range(1, order + 1):
        cols += [np.cos(k * theta_rad), np.sin(k * theta_rad)]
    return np.column_stack(cols)


def _wls(X, y, w):
    import statsmodels.api as sm

    return sm.WLS(y, X, weights=w).fit()


def max_order(n: int, radius: float, min_wavelength: float, cap: int) -> int:
    by_n = (n - 2) // 2  # 2K + 1 parameters must leave at least one residual degree of freedom
    by_wave = int(np.floor(2 * np.pi * radius / min_wavelength))
    return max(1, min(by_n, by_wave, cap))


def partial_f(full, restricted, alpha, name) -> TestResult:
    """F test of the restriction ``restricted`` within ``full`` (statsmodels compare_f_test)."""
    df_num = int(round(restricted.df_resid - full.df_resid))
    df_f = int(round(full.df_resid))
    if df_f <= 0 or full.ssr <= 0:
        return TestResult(name, float("inf"), 0.0, (df_num, df_f), True)
    f, p, _ = full.compare_f_test(restricted)
    return TestResult(name, float(f), float(p), (df_num, df_f), float(p) <= alpha)


def fit_fourier(theta_deg, z, std_error, radius, *, selection="bic", order=None, max_order_cap=30,
                min_wavelength=3.0, alpha=0.05, noise_known=False) -> FourierFit:
    th = np.radians(np.asarray(theta_deg, dtype=float))
    z = np.asarray(z, dtype=float)
    n = len(z)
    weighted = std_error is not None and np.all(np.isfinite(std_error)) and np.all(np.asarray(std_error) > 0)
    w = 1.0 / np.asarray(std_error) ** 2 if weighted else np.ones(n)
    kmax = max_order(n, radius, min_wavelength, max_order_cap)
    table = []
    fits = {}

    def get(k):
        if k not in fits:
            X = design(th, k)
            fits[k] = (X, _wls(X, z, w))
        return fits[k]

    if selection == "fixed":
        K = min(int(order), kmax)
        how = f"fixed order {order}" + (f" (capped at {kmax})" if K < order else "")
    elif selection == "bic":
        best, K = np.inf, 1
        for k in range(1, kmax + 1):
            bic = float(get(k)[1].bic)
            table.append((k, bic))
            if bic < best:
                best, K = bic, k
        how = f"minimum BIC over K = 1..{kmax}"
    else:  # nested F tests: add modes while one of the next two is significant
        K = 1
        while K < kmax:
            nxt = None
            for step in (1, 2):
                if K + step > kmax:
                    break
                t = partial_f(get(K + step)[1], get(K)[1], alpha, f"modes {K + 1}..{K + step}")
                table.append((K + step, t.p_value))
                if t.reject:
                    nxt = K + step
                    break
            if nxt is None:
                break
            K = nxt
        how = f"nested F tests at alpha = {alpha} (look-ahead of 2 modes), K <= {kmax}"
    X, res = get(K)
    df = int(round(res.df_resid))
    coef = np.asarray(res.params)
    xtx_inv = np.asarray(res.normalized_cov_params)
    cov = np.asarray(res.cov_params()) if df > 0 else xtx_inv * np.nan
    # tilt terms inside the chosen model: partial F test against the model without k = 1
    keep = [0] + list(range(3, X.shape[1]))
    restricted = _wls(X[:, keep], z, w)
    tilt_f = partial_f(res, restricted, alpha, "tilt terms (k = 1) within the selected model")
    chi = None
    if weighted and noise_known:
        bt = coef[1:3]
        ct = xtx_inv[1:3, 1:3]
        x2 = float(bt @ np.linalg.solve(ct, bt))
        p = float(stats.chi2.sf(x2, 2))
        chi = TestResult("tilt against the measured noise (chi-square)", x2, p, (2,), p <= alpha)
    return FourierFit(order=K, coef=coef, std_err=np.sqrt(np.diag(cov)), cov=cov, cov_unscaled=xtx_inv,
                      weighted=bool(weighted), selection=how, order_table=tuple(table), rss=float(res.ssr),
                      df_resid=df, tilt_partial_f=tilt_f, tilt_chi2=chi, max_order_allowed=kmax)


def evaluate_model(fit: FourierFit, theta_deg, k_min=0):
    """Model value at azimuths using modes k >= k_min, and its 1-sigma band from the covariance."""
    th = np.radians(np.asarray(theta_deg, dtype=float))
    X = design(th, fit.order)
    cols = [0] if k_min == 0 else []
    cols += [c for c in range(1, X.shape[1]) if (c + 1) // 2 >= max(k_min, 1)]
    Xs = X[:, cols]
    val = Xs @ fit.coef[cols]
    sd = np.sqrt(np.einsum("ij,jk,ik->i", Xs, fit.cov[np.ix_(cols, cols)], Xs))
    return val, sd


def curvature(fit: FourierFit, theta_deg, radius):
    """u''(s) = -sum_{k>=2} (k/R)^2 (a_k cos k t + b_k sin k t), 1/m, with its 1-sigma band."""
    th = np.radians(np.asarray(theta_deg, dtype=float))
    G = np.zeros((len(th), len(fit.coef)))
    for k in range(2, fit.order + 1):
        G[:, 2 * k - 1] = -(k / radius) ** 2 * np.cos(k * th)
        G[:, 2 * k] = -(k / radius) ** 2 * np.sin(k * th)
    kap = G @ fit.coef
    sd = np.sqrt(np.einsum("ij,jk,ik->i", G, fit.cov, G))
    return kap, sd
