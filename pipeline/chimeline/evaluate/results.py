"""Result records of the settlement evaluation. Lengths in metres, stresses in pascals, angles in degrees.

Everything is a frozen dataclass built once; arrays are per input point ``(n,)`` or per evaluation grid
azimuth ``(g,)`` as each field says.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Optional

import numpy as np

from ..io.surveys import SurveyData


@dataclass(frozen=True)
class TestResult:
    """A hypothesis test: statistic, p-value, degrees of freedom and the decision at alpha."""

    name: str
    statistic: float
    p_value: float
    df: tuple
    reject: bool  # True: the effect (e.g. a tilt plane) is statistically real at alpha


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

    a: float  # m
    b: float  # m
    c: float  # m
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
    cov: np.ndarray  # (2K+1, 2K+1) m^2, scaled by the residual variance (statsmodels WLS cov_params)
    cov_unscaled: np.ndarray  # (2K+1, 2K+1) m^2, from the weights alone (known variances)
    weighted: bool
    selection: str  # how the order was chosen
    order_table: tuple  # ((K, statistic), ...) of the selection
    rss: float  # weighted residual sum of squares
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


@dataclass(frozen=True)
class DeflectionCheck:
    """The B.3.2.1 deflection check at the input points."""

    S: np.ndarray  # (n,) m, out-of-plane deflection (nan without neighbours)
    S_sd: np.ndarray  # (n,) m, 1 sigma
    allowable: np.ndarray  # (n,) m, S_max at each point's spacing
    ratio: np.ndarray  # (n,) |S| / S_max
    L1: np.ndarray  # (n,) m, arc to the previous neighbour
    L2: np.ndarray  # (n,) m, arc to the next neighbour
    exceeds: np.ndarray  # (n,) bool
    indeterminate: np.ndarray  # (n,) bool
    spacing: str  # which L was used, in words


@dataclass(frozen=True)
class CurvatureCheck:
    """Curvature of the Fourier model (modes >= 2) on the evaluation grid against 11 Y / (E H)."""

    azimuth_deg: np.ndarray  # (g,)
    kappa: np.ndarray  # (g,) 1/m (nan where no data near)
    kappa_sd: np.ndarray  # (g,) 1/m, 1 sigma
    limit: float  # 1/m
    exceeds: np.ndarray  # (g,) bool
    indeterminate: np.ndarray  # (g,) bool


@dataclass(frozen=True)
class SurveyCurvature:
    """Second-difference curvature at the points of a sparse survey."""

    azimuth_deg: np.ndarray  # (n,)
    kappa: np.ndarray  # (n,) 1/m
    limit: float  # 1/m


@dataclass(frozen=True)
class SettledArc:
    start_deg: float
    end_deg: float
    arc_length: float  # m
    depth: float  # m below the chord between the two highs
    deepest_deg: float
    depth_sd: float  # m, 1 sigma
    permissible: Optional[float]  # m, from the table (None outside it)
    verdict: str  # acceptable, exceeds, indeterminate, outside table
    ratio: Optional[float] = None  # depth / permissible


@dataclass(frozen=True)
class ArcTableInfo:
    title: str
    source: str
    illustrative: bool
    curve_arc_length: Optional[np.ndarray] = None  # (c,) m, the permissible curve used (None: no curve)
    curve_depth: Optional[np.ndarray] = None  # (c,) m


@dataclass(frozen=True)
class ModelCurve:
    """The Fourier model's out-of-plane part (modes >= 2) on the evaluation grid, for figures and audit."""

    azimuth_deg: np.ndarray  # (g,)
    value: np.ndarray  # (g,) m
    sd: np.ndarray  # (g,) m, 1 sigma


@dataclass(frozen=True)
class EvaluationSettings:
    order_selection: str
    tilt_rule: str
    alpha: float
    r2_min: float
    deflection_L: str


@dataclass(frozen=True)
class DecimatedRun:
    start_deg: float
    r_squared: float
    tilt_p_value: float
    tilt_amplitude: float  # m
    max_deflection_ratio: float
    verdict: str
    deflection_verdict: str
    evaluation: Optional["Evaluation"] = None  # kept when a single start was asked for


@dataclass(frozen=True)
class DecimationStudy:
    """Conventional n-point surveys sampled from a dense profile and evaluated as surveys."""

    n_points: int
    runs: tuple  # DecimatedRun, one per start azimuth
    note: Optional[str] = None

    def _stat(self, attr):
        v = np.array([getattr(r, attr) for r in self.runs])
        return {"min": float(v.min()), "median": float(np.median(v)), "max": float(v.max())}

    @property
    def max_deflection_ratio(self) -> dict:
        return self._stat("max_deflection_ratio")

    @property
    def r_squared(self) -> dict:
        return self._stat("r_squared")

    @property
    def verdicts(self) -> dict:
        return {v: sum(r.verdict == v for r in self.runs) for v in ("acceptable", "indeterminate", "exceeds")}


@dataclass(frozen=True)
class Evaluation:
    survey: SurveyData
    tank: TankData
    tilt: TiltFit
    fourier: FourierFit
    out_of_plane: np.ndarray  # (n,) m at the input points
    out_of_plane_reference: str
    model: ModelCurve
    deflection: DeflectionCheck
    curvature: CurvatureCheck
    curvature_sparse: Optional[SurveyCurvature]
    arcs: tuple  # SettledArc
    arc_table: ArcTableInfo
    criteria: tuple  # Criterion
    verdict: str
    adequacy: tuple  # str, warnings about the survey
    warnings: tuple  # str
    settings: EvaluationSettings
    decimation: Optional[DecimationStudy] = None
