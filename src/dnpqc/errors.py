"""The one exception type for user errors (bad scenario values, bad options)."""


class ScenarioError(ValueError):
    """A user input is invalid; the message names the field, the value and what is allowed."""
