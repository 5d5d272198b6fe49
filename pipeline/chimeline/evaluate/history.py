"""A tank's settlement between two surveys, and when the current rate would bring the governing ratio to 1.

The profile difference (later minus earlier, on the azimuths both surveys have, with its standard error and the
datum uncertainty of both) comes from ``evaluate.comparison.profile_difference``. Here it is split like a
survey: the Fourier model of the difference (``evaluate.fourier.fit_fourier``, autocorrelation-corrected
covariance for dense profiles) gives the change of the tilt plane (k = 1, with the scans' vertical reference
added to its covariance) and whether the out-of-plane shape changed (Wald test of the k >= 2 terms); the
out-of-plane change per azimuth is the difference minus its fitted uniform and tilt terms. Rates are changes
divided by the years between the survey dates.

Extrapolation: the governing ratio r of the latest survey and of the one before give the rate
(r_b - r_a) / dt; only when that rate is positive and significant (its 95 % interval excludes zero) is the
date at which the line reaches 1 given, with a 95 % interval by Fieller's theorem for the ratio
(1 - r_b) / (r_b - r_a) (r_b appears in both, with covariance -var(r_b)); the interval is finite exactly when
the rate is significant at that level. It is a linear extrapolation of two surveys, not a prediction.
"""
from __future__ import annotations

import datetime
import math
from dataclasses import dataclass
from typing import Optional

import numpy as np
from scipy import stats

from ..core.robust import Z95
from .fourier import design, fit_fourier

DAYS_PER_YEAR = 365.25
LINEAR_NOTE = ("linear extrapolation of the governing ratio between the last two surveys; settlement need not "
               "continue at a constant rate: it is an indication for planning the next survey, not a prediction")


def years_between(date_a: str, date_b: str) -> float:
    """Years (of 365.25 days) from ISO date a to ISO date b."""
    return (datetime.date.fromisoformat(date_b) - datetime.date.fromisoformat(date_a)).days / DAYS_PER_YEAR


def date_after(date: str, years: float) -> str:
    """The ISO date ``years`` after ``date`` (days rounded)."""
    return (datetime.date.fromisoformat(date) + datetime.timedelta(days=round(years * DAYS_PER_YEAR))).isoformat()


@dataclass(frozen=True)
class Extrapolation:
    """When the governing ratio would reach 1 at the current (linear) rate."""

    check: str  # the governing check's name at the latest survey
    ratio_from: float  # ratio at the earlier survey
    ratio_from_se: float  # 1 sigma
    ratio_to: float  # ratio at the latest survey
    ratio_to_se: float  # 1 sigma
    rate_per_year: float  # 1/year
    rate_se: float  # 1/year, 1 sigma
    significant: bool  # rate > 0 and its 95 % interval excludes zero
    status: str  # extrapolated | reached | not increasing | not significant
    years_to_limit: Optional[float] = None  # years after the latest survey (None unless extrapolated)
    years_ci95: Optional[tuple] = None  # (lo, hi) years after the latest survey, Fieller's 95 % interval
    years_se: Optional[float] = None  # delta-method 1 sigma, for reference
    date: Optional[str] = None  # ISO date the line reaches 1
    date_ci95: Optional[tuple] = None  # (ISO, ISO)
    method: str = LINEAR_NOTE


def fieller_interval(num: float, den: float, var_num: float, var_den: float, cov: float,
                     z: float = Z95) -> Optional[tuple]:
    """95 % interval for num / den by Fieller's theorem: the theta with |num - theta den| <= z sd(num - theta den).
    None when it is not a finite interval (den not significant at this z)."""
    a = den ** 2 - z ** 2 * var_den
    if a <= 0:
        return None
    b = num * den - z ** 2 * cov
    c = num ** 2 - z ** 2 * var_num
    disc = b ** 2 - a * c
    if disc < 0:  # cannot happen when a > 0 (the point estimate satisfies the inequality); guard rounding
        disc = 0.0
    r = math.sqrt(disc)
    return ((b - r) / a, (b + r) / a)


def extrapolate_ratio(check: str, date_a: str, r_a: float, se_a: float, date_b: str, r_b: float,
                      se_b: float) -> Extrapolation:
    """The date the ratio line through the two surveys reaches 1, with Fieller's 95 % interval."""
    dt = years_between(date_a, date_b)
    d = r_b - r_a
    var_d = se_a ** 2 + se_b ** 2
    rate, rate_se = d / dt, math.sqrt(var_d) / dt
    significant = d > 0 and d - Z95 * math.sqrt(var_d) > 0
    common = dict(check=check, ratio_from=r_a, ratio_from_se=se_a, ratio_to=r_b, ratio_to_se=se_b,
                  rate_per_year=rate, rate_se=rate_se, significant=significant)
    if r_b >= 1.0:
        return Extrapolation(status="reached", **common)
    if d <= 0:
        return Extrapolation(status="not increasing", **common)
    ci = fieller_interval(1.0 - r_b, d, se_b ** 2, var_d, -se_b ** 2)
    if not significant or ci is None:
        return Extrapolation(status="not significant", **common)
    theta = (1.0 - r_b) / d
    var_theta = (se_b ** 2 + 2 * theta * se_b ** 2 + theta ** 2 * var_d) / d ** 2  # cov(num, den) = -var(r_b)
    years = theta * dt
    lo, hi = max(ci[0], 0.0) * dt, ci[1] * dt
    return Extrapolation(status="extrapolated", years_to_limit=years, years_ci95=(lo, hi),
                         years_se=math.sqrt(var_theta) * dt, date=date_after(date_b, years),
                         date_ci95=(date_after(date_b, lo), date_after(date_b, hi)), **common)


@dataclass(frozen=True)
class SettlementChange:
    """The change of the junction profile between two surveys (later minus earlier); lengths in m."""

    from_date: str
    to_date: str
    years: float  # between the survey dates
    azimuth_deg: np.ndarray  # (n,) common azimuths (the earlier survey's bins or points)
    difference: np.ndarray  # (n,) m, later minus earlier elevation
    difference_se: np.ndarray  # (n,) m, 1 sigma (both surveys' standard errors)
    out_of_plane: np.ndarray  # (n,) m, the difference minus its fitted uniform and tilt terms
    out_of_plane_se: np.ndarray  # (n,) m, 1 sigma
    mean: float  # m, weighted mean difference (uniform settlement change; negative = settled)
    mean_se: float  # m, 1 sigma, with both scans' datum uncertainty
    consistency_p: float  # chi-square test of the bin differences about their mean (from the comparison)
    tilt_b: float  # m, cos term of the tilt change  z = b cos(theta) + c sin(theta)
    tilt_c: float  # m, sin term
    tilt_cov: np.ndarray  # (2, 2) m^2, their covariance (model, autocorrelation and the vertical reference)
    tilt_p: float  # Wald test that the tilt plane changed
    modes_p: Optional[float]  # Wald test that the out-of-plane shape changed (k >= 2); None: order 1 model
    model_order: int  # Fourier order of the difference model
    model_selection: str  # how it was chosen

    @property
    def tilt_amplitude(self) -> float:
        """m, amplitude of the tilt change."""
        return float(np.hypot(self.tilt_b, self.tilt_c))

    @property
    def tilt_amplitude_se(self) -> float:
        """m, 1 sigma of the amplitude (delta method along the change's direction)."""
        a = self.tilt_amplitude
        if a == 0:
            return float(math.sqrt(np.trace(self.tilt_cov) / 2))
        u = np.array([self.tilt_b, self.tilt_c]) / a
        return float(math.sqrt(u @ self.tilt_cov @ u))

    @property
    def tilt_low_azimuth_deg(self) -> float:
        """Where the tilt change lowers the junction most (degrees, the scan's azimuth convention)."""
        return float(np.mod(np.degrees(np.arctan2(self.tilt_c, self.tilt_b)) + 180.0, 360.0))

    def rate(self, value):
        """A change per year."""
        return np.asarray(value) / self.years if np.ndim(value) else float(value) / self.years

    @property
    def largest_out_of_plane(self) -> tuple:
        """(azimuth deg, change m, 1 sigma m) where the out-of-plane change is largest in size."""
        if not len(self.out_of_plane):
            return (float("nan"), float("nan"), float("nan"))
        k = int(np.argmax(np.abs(self.out_of_plane)))
        return float(self.azimuth_deg[k]), float(self.out_of_plane[k]), float(self.out_of_plane_se[k])


def settlement_change(from_date: str, to_date: str, diff: dict, radius: float, *, dense: bool,
                      vertical_reference: float = 0.0, cv_block_deg: float = 10.0, cv_folds: int = 6,
                      min_wavelength: float = 3.0, max_order: int = 30, alpha: float = 0.05) -> SettlementChange:
    """Split a profile difference (``evaluate.comparison.profile_difference``, lengths in m) into uniform, tilt
    and out-of-plane change. ``vertical_reference`` (rad, 1 sigma per axis, per survey) adds the scans' levelling
    uncertainty to the tilt change: 2 (vertical_reference R)^2 per axis."""
    az = np.asarray(diff["azimuth_deg"], dtype=float)
    d = np.asarray(diff["difference"], dtype=float)
    sd = np.asarray(diff["difference_sd"], dtype=float)
    years = years_between(from_date, to_date)
    if years <= 0:
        raise ValueError(f"survey dates not increasing: {from_date} -> {to_date}")
    sel = "blocked_cv" if dense else "nested_f"
    fit = fit_fourier(az, d, sd, radius, selection=sel, max_order_cap=max_order, min_wavelength=min_wavelength,
                      alpha=alpha, cv_block_deg=cv_block_deg, cv_folds=cv_folds)
    tilt_cov = np.array(fit.cov[1:3, 1:3], dtype=float) + np.eye(2) * 2 * (vertical_reference * radius) ** 2
    b, c = float(fit.coef[1]), float(fit.coef[2])
    df = max(fit.df_resid, 1)
    w = float(np.array([b, c]) @ np.linalg.solve(tilt_cov, np.array([b, c]))) / 2.0
    tilt_p = float(stats.f.sf(w, 2, df))
    modes_p = None
    if fit.order >= 2:
        cm = fit.coef[3:]
        wm = float(cm @ np.linalg.solve(fit.cov[3:, 3:], cm)) / len(cm)
        modes_p = float(stats.f.sf(wm, len(cm), df))
    X = design(np.radians(az), 1)
    plane = X @ fit.coef[:3]
    plane_var = np.einsum("ij,jk,ik->i", X, fit.cov[:3, :3], X)  # a levelling error is a tilt: removed with it
    oop = d - plane
    oop_se = np.sqrt(sd ** 2 + plane_var)
    return SettlementChange(from_date=from_date, to_date=to_date, years=years, azimuth_deg=az, difference=d,
                            difference_se=sd, out_of_plane=oop, out_of_plane_se=oop_se,
                            mean=float(diff["mean_difference"]), mean_se=float(diff["mean_difference_se"]),
                            consistency_p=float(diff.get("consistency_p", float("nan"))), tilt_b=b, tilt_c=c,
                            tilt_cov=tilt_cov, tilt_p=tilt_p, modes_p=modes_p, model_order=fit.order,
                            model_selection=fit.selection)


def amplitude_rate(b_a: float, c_a: float, b_b: float, c_b: float, change: SettlementChange) -> tuple:
    """(rate m/year, 1 sigma) of the tilt amplitude |(b, c)| between two surveys; the uncertainty is the tilt
    change's covariance projected on the later tilt's direction (delta method)."""
    amp_a, amp_b = math.hypot(b_a, c_a), math.hypot(b_b, c_b)
    if amp_b > 0:
        u = np.array([b_b, c_b]) / amp_b
        se = math.sqrt(float(u @ change.tilt_cov @ u))
    else:
        se = math.sqrt(float(np.trace(change.tilt_cov)) / 2)
    return (amp_b - amp_a) / change.years, se / change.years
