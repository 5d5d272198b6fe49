"""Exception hierarchy. The CLI turns any of these into one stderr line and exit code 2."""
from __future__ import annotations

import reprlib

_REPR = reprlib.Repr()
_REPR.maxstring = 48
_REPR.maxother = 48
_REPR.maxlong = 24
_REPR.maxlist = _REPR.maxtuple = _REPR.maxset = 6
_REPR.maxdict = 4
_REPR.maxlevel = 2


def clip_repr(value, limit: int = 80) -> str:
    """repr of a user's value for an error message, bounded however large the value is (at most ``limit`` chars).

    reprlib truncates strings, lists and mappings before formatting them, so a huge or deeply nested value
    (an expanded YAML alias bomb, a 10 000-digit number) costs no time and no memory here.
    """
    try:
        text = _REPR.repr(value)
    except Exception:  # e.g. an int beyond the interpreter's digit limit
        text = f"<{type(value).__name__}>"
    return text if len(text) <= limit else text[: limit - 3] + "..."


def one_line(text, limit: int = 600) -> str:
    """A message as the one line the command line prints: whitespace runs collapsed, at most ``limit`` characters
    (the CLI's error funnel and the failed jobs of a batch use the same form)."""
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


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
