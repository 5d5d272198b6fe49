"""Exception hierarchy. The CLI turns any of these into one stderr line and exit code 2."""


class ChimelineError(Exception):
    """Base of every error chimeline reports to the user."""


class ConfigError(ChimelineError):
    """Bad config file, key, type or value."""


class InputError(ChimelineError):
    """Unreadable, unsupported or empty scan, survey or profile."""


class StageError(ChimelineError):
    """A stage cannot produce a result (no shell found, too little coverage, ...)."""


class OutputError(ChimelineError):
    """Outputs cannot be written."""


class DependencyError(ChimelineError):
    """A required library is missing or cannot be loaded (names the package to install)."""
