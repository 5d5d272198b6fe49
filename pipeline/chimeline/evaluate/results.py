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
    r2_rule_met: bool  # R^2 >= r2_min (the standard's acceptance of the cosine fit for B.3.2.1)
    significant: bool  # a tilt plane exists at 95 % (by the test named in decided_by)
    decided_by: str  # the test that decided ``significant``, in words
    n: int
    p_value: float = 1.0  # p-value of that test


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
    hac_lags: int = 0  # lags of the HAC covariance (0: the ordinary covariance)
    residuals: Optional[np.ndarray] = None  # (n,) m, data minus the model at the input points


@dataclass(frozen=True)
class Criterion:
    """One check. The standard's checks (``clause`` set) decide the overall verdict; screening flags inform.

    verdict: acceptable | exceeds | indeterminate, or not assessed (e.g. no permissible table supplied) and
    not applicable (e.g. the standard does not accept the cosine fit for B.3.2.1); for a screening flag,
    exceeds means the flag is raised.
    """

    name: str
    verdict: str
    governing: str  # the number that decides, in words
    azimuth_ranges: tuple = ()  # ((start_deg, end_deg), ...) responsible
    reasons: tuple = ()  # notes, in words
    clause: Optional[str] = None  # "B.3.2.1", "B.3.2.2" for the standard's checks; None for screening
    ratio: Optional[float] = None  # the check's largest ratio (value / allowable), as the clause prescribes
    ratio_upper95: Optional[float] = None  # its 95 % upper bound from the measurement uncertainty
    ratio_lower95: Optional[float] = None  # its 95 % lower bound
    uncertainty: str = ""  # the measurement-uncertainty statement, in words
    evidence_coverage: Optional[float] = None  # share of the circumference with evidence for this check
    at_deg: Optional[float] = None  # deg: where the largest ratio is (None when no location was judged)

    @property
    def screening(self) -> bool:
        return self.clause is None

    @property
    def shown(self) -> str:
        """The verdict in words: a screening flag is raised or clear (it informs, it never "exceeds")."""
        if self.clause is not None:
            return self.verdict
        return {"exceeds": "raised", "acceptable": "clear"}.get(self.verdict, self.verdict)

    @property
    def decides(self) -> bool:
        """Takes part in the overall verdict."""
        return self.clause is not None and self.verdict in ("acceptable", "exceeds", "indeterminate")


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
    """Curvature of the Fourier model (modes >= 2) smoothed at ``smoothing`` on the evaluation grid, against
    11 Y / (E H), with pointwise and simultaneous 95 % bands."""

    azimuth_deg: np.ndarray  # (g,)
    kappa: np.ndarray  # (g,) 1/m (nan where no data near)
    kappa_sd: np.ndarray  # (g,) 1/m, 1 sigma (HAC for dense profiles)
    limit: float  # 1/m
    exceeds: np.ndarray  # (g,) bool: the simultaneous band lies wholly past the limit
    indeterminate: np.ndarray  # (g,) bool: the simultaneous band straddles the limit
    smoothing: float = 0.0  # m, spacing of the second difference the curvature is smoothed at (0: none)
    q_pointwise: float = 1.959963984540054  # quantile of the pointwise 95 % band
    q_simultaneous: float = 1.959963984540054  # quantile of the simultaneous 95 % band (max-t)
    assessed: bool = True  # False: no mode above 1 in the model (sparse surveys)


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
    permissible: Optional[float]  # m, from the table (None when not judged)
    verdict: str  # acceptable, exceeds, indeterminate, not covered (outside the table), in a gap, below table,
    #             not assessed (no table)
    ratio: Optional[float] = None  # depth / permissible
    ratio_upper95: Optional[float] = None  # (depth + 1.96 sd) / permissible


@dataclass(frozen=True)
class LocalDip:
    """A dip shorter than the deflection spacing, found in the data (screening)."""

    start_deg: float
    end_deg: float
    length: float  # m along the shell
    depth: float  # m below the long-wave model (wavelengths >= 2 x the deflection spacing)
    deepest_deg: float
    depth_sd: float  # m, 1 sigma of the smoothed residual (correlated noise included)
    threshold: float  # m, depth a dip must exceed to count (simultaneous over the circumference)
    allowable: float  # m, S_max at half the dip's length (its centre against its ends)
    ratio: float  # depth / allowable


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
    alpha: float
    r2_min: float
    deflection_L: str
    deflection_spacing: float  # m
    curvature_smoothing: float  # m
    min_evidence_coverage: float
    reading_sigma: Optional[float] = None  # m, 1 sigma of a survey reading used for the uncertainty (surveys)
    reading_sigma_source: str = ""  # in words


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
    criteria: tuple  # Criterion: the standard's checks first, then the screening flags
    verdict: str  # overall, from the standard's checks only: acceptable | exceeds | indeterminate
    governing: str  # name of the check that sets the verdict (or why none does)
    adequacy: tuple  # str, warnings about the survey
    warnings: tuple  # str
    settings: EvaluationSettings
    dips: tuple = ()  # LocalDip
    decimation: Optional[DecimationStudy] = None
