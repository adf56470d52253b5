"""The exception types for user errors; the CLI prints either in one line with exit code 2."""


class ScenarioError(ValueError):
    """A user input is invalid; the message names the field, the value and what is allowed."""


class RunError(Exception):
    """A run refused or stopped at run time (output place, results store, cluster, memory, work
    limit); the message says what and what to do instead."""
