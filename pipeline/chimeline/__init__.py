"""chimeline: shell-to-bottom junction profiles from tank scans, and their settlement evaluation.

The stages are callable on arrays for notebooks and return the same result objects the CLI writes::

    import chimeline
    cfg, resolved, source = chimeline.load_config("configs/default.yaml")
    res = chimeline.process_scan("scan.laz", cfg, resolved, source)   # RunResult: shell, junction, profile, noise
    res.profile.elevation, res.profile.std_error, res.noise.sigma
    res.geometry.plumb.total, res.geometry.roundness.ovality          # ShellGeometry (None if switched off)

Public names are loaded on first use (so ``import chimeline`` and ``chimeline --help`` stay fast).
"""
import importlib
import logging

from .version import __version__

logging.getLogger(__name__).addHandler(logging.NullHandler())

_PUBLIC = {
    "ChimelineConfig": "config", "load_config": "config",
    "ChimelineError": "errors", "ConfigError": "errors", "InputError": "errors", "StageError": "errors",
    "OutputError": "errors", "DependencyError": "errors",
    "CAUTION": "notices",
    "Frame": "stages.frame", "make_frame": "stages.frame",
    "ShellFit": "stages.shell", "fit_shell": "stages.shell", "refine_base": "stages.shell",
    "Junction": "stages.junction", "extract_junction": "stages.junction", "RingFilter": "stages.junction",
    "Profile": "stages.profile", "bin_junction": "stages.profile",
    "NoiseEstimate": "stages.noise", "estimate_noise": "stages.noise", "attach_uncertainty": "stages.noise",
    "ShellGeometry": "stages.geometry", "measure_geometry": "stages.geometry", "FaceSampler": "stages.geometry",
    "SurveyData": "io.surveys", "read_survey": "io.surveys", "load_arc_table": "io.arctable",
    "read_run_folder": "io.runfiles",
    "evaluate_survey": "evaluate", "tank_data": "evaluate", "Evaluation": "evaluate",
    "RunResult": "workflows.run", "process_scan": "workflows.run", "run_scan": "workflows.run",
}

__all__ = ["__version__", *_PUBLIC]


def __getattr__(name):
    if name in _PUBLIC:
        return getattr(importlib.import_module(f".{_PUBLIC[name]}", __name__), name)
    raise AttributeError(f"module 'chimeline' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)
