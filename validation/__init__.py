"""Simulated validation of the feature engine: cohort runner, beat matching, baseline."""
