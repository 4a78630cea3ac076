"""Orchestration: one case or one sweep from inputs to result data."""
