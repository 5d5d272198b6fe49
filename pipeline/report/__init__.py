"""Renderers: CSV, JSON, plots and HTML. Nothing here computes results."""
