"""Exception hierarchy. The CLI turns any of these into one stderr line and exit code 2."""


class PipelineError(Exception):
    """Base of every error chimeline reports to the user."""


class ConfigError(PipelineError):
    """Bad config file, key, type or value."""


class InputError(PipelineError):
    """Unreadable, unsupported or empty scan, survey or profile."""


class StageError(PipelineError):
    """A stage cannot produce a result (no shell found, too little coverage, ...)."""


class OutputError(PipelineError):
    """Outputs cannot be written."""
