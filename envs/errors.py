"""Error types of the world package."""


class ConfigError(ValueError):
    """A configuration value is invalid; the message names the field and the value."""


class ActionError(ValueError):
    """An action given to the environment is not one of its actions."""
