"""Benchmarks of the engine and the fleet recompute (figures, not tests); outside
``analysis/engine`` so that the engine package holds the engine alone."""
