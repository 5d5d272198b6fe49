"""chimeline: shell-to-bottom junction profiles from tank scans, and their settlement evaluation.

The stages are callable on arrays for notebooks and return the same result objects the CLI writes::

    from pipeline import load_config, process_scan, evaluate_survey
    cfg, resolved, source = load_config("configs/default.yaml")
    res = process_scan("scan.laz", cfg, resolved, source)      # RunResult: shell, junction, profile, noise
    res.profile.elevation, res.profile.std_error, res.noise.sigma
"""
__version__ = "0.1.0"

from .config import PipelineConfig, load_config  # noqa: E402
from .errors import ConfigError, InputError, OutputError, PipelineError, StageError  # noqa: E402
from .evaluate import evaluate_survey, read_survey, tank_data  # noqa: E402
from .model import Frame, Junction, NoiseEstimate, Profile, ShellFit  # noqa: E402
from .runner import process_scan, run_scan  # noqa: E402
from .stages.frame import make_frame  # noqa: E402
from .stages.junction import extract_junction  # noqa: E402
from .stages.noise import estimate_noise  # noqa: E402
from .stages.profile import attach_uncertainty, bin_junction  # noqa: E402
from .stages.shell import fit_shell, refine_base  # noqa: E402

__all__ = ["__version__", "PipelineConfig", "load_config", "PipelineError", "ConfigError", "InputError",
           "StageError", "OutputError", "Frame", "ShellFit", "Junction", "Profile", "NoiseEstimate",
           "make_frame", "fit_shell", "refine_base", "extract_junction", "bin_junction", "attach_uncertainty",
           "estimate_noise", "evaluate_survey", "read_survey", "tank_data", "process_scan", "run_scan"]
