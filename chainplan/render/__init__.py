"""Renderers: terminal tables, JSON, plots.  They only read results of the core."""
