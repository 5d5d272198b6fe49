"""Pipeline stages, one module each: frame, shell, junction, profile, noise."""
