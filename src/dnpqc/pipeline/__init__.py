"""Orchestration: a scenario run end to end (`job`) and the sweep runner with its workers and
store (`sweep`)."""
