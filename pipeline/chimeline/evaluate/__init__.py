"""Settlement evaluation: tilt plane, Fourier regression, the B.3.2.1 deflection check, curvature, settled arcs,
verdicts, the decimation study and the two-run comparison. This module only re-exports."""
from .adequacy import adequacy, minimum_points
from .decimation import decimate, decimation_study
from .results import Evaluation, TankData
from .settlement import evaluate_survey
from .tank import has_tank_data, tank_data

__all__ = ["adequacy", "minimum_points", "decimate", "decimation_study", "Evaluation", "TankData",
           "evaluate_survey", "has_tank_data", "tank_data"]
