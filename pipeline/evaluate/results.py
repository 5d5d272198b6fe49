"""Result records of the settlement evaluation. Lengths in metres, stresses in pascals, angles in degrees."""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Optional

import numpy as np


@dataclass(frozen=True)
class TestResult:
    """A hypothesis test: statistic, p-value, degrees of freedom and the decision at alpha."""

    name: str
    statistic: float
    p_value: float
    df: tuple
    reject: bool  # True: the effect (e.g. a tilt plane) is statistically real at alpha


@dataclass(frozen=True)
class SurveyData:
    azimuth_deg: np.ndarray  # (n,) in [0, 360), strictly increasing
    elevation: np.ndarray  # (n,) m
    std_error: Optional[np.ndarray]  # (n,) m 1 sigma, or None
    label: tuple  # (n,) str
    dense: bool  # a scan profile (many bins) rather than a conventional survey
    units: str  # unit of the input file
    source: str  # path or description
    noise_sigma: Optional[float] = None  # m, per-point scanner noise from profile.json
    n_dropped: int = 0  # bins without value (gaps) not used


@dataclass(frozen=True)
class TankData:
    diameter: float  # m
    radius: float  # m
    shell_height: float  # m
    yield_strength: float  # Pa
    youngs_modulus: float  # Pa
    roof: str
    diameter_source: str  # "config" or "fitted"


@dataclass(frozen=True)
class TiltFit:
    """Single cosine z = a + b cos(theta) + c sin(theta) by ordinary least squares."""

    a: float
    b: float
    c: float
    amplitude: float  # m, half the peak-to-peak tilt at the shell
    low_azimuth_deg: float  # where the plane is lowest
    r_squared: float
    f_test: TestResult  # overall F test of the cosine fit
    r2_rule_met: bool  # R^2 >= r2_min (the standard's acceptance)
    significant: bool  # per the configured tilt_rule
    decided_by: str  # "p_value" or "r_squared"
    n: int


@dataclass(frozen=True)
class FourierFit:
    order: int
    coef: np.ndarray  # (2K+1,) a0, a1, b1, a2, b2, ... m
    std_err: np.ndarray  # (2K+1,) m
    cov: np.ndarray  # (2K+1, 2K+1) m^2, scaled by the residual variance (as statsmodels WLS)
    cov_unscaled: np.ndarray  # (2K+1, 2K+1) m^2, from the weights alone (known variances)
    weighted: bool
    selection: str  # how the order was chosen
    order_table: tuple  # ((K, statistic), ...) of the selection
    rss: float
    df_resid: int
    tilt_partial_f: TestResult
    tilt_chi2: Optional[TestResult]  # against the measured noise (dense, when known)
    max_order_allowed: int


@dataclass(frozen=True)
class Criterion:
    name: str
    verdict: str  # acceptable, exceeds, indeterminate
    governing: str  # the number that decides, in words
    azimuth_ranges: tuple = ()  # ((start_deg, end_deg), ...) responsible
    reasons: tuple = ()


@dataclass
class Evaluation:
    survey: SurveyData
    tank: TankData
    tilt: TiltFit
    fourier: FourierFit
    out_of_plane: np.ndarray  # (n,) m at the input points
    out_of_plane_reference: str
    deflection: dict  # arrays per point: S, S_sd, allowable, ratio, L, status
    curvature: dict  # azimuth_deg, kappa, kappa_sd, limit (1/m)
    curvature_sparse: Optional[dict]
    arcs: list
    arc_table: dict
    criteria: list
    verdict: str
    adequacy: list  # warnings about the survey
    warnings: list
    decimation: Optional[dict] = None
    settings: dict = field(default_factory=dict)
