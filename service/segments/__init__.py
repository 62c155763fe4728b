"""Metric splits by topic, timing and form, with their statistics."""
