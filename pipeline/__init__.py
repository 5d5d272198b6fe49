"""chimeline: shell-to-bottom junction profiles from tank scans, and their settlement evaluation."""
__version__ = "0.1.0"
