"""Error types of the package: every user's mistake derives from :class:`ShortcutGymError`.

A :class:`ShortcutGymError` means bad input (a config value, an action, a trial log, a sweep
spec or folder, a backend setting, a command-line option): its message names what is wrong and
where, and the command line reports it in one line with exit code 2. Any other exception is a
bug of the package and keeps its traceback.
"""


class ShortcutGymError(Exception):
    """Base of every error caused by the user's input; the message names the fault."""


class ConfigError(ShortcutGymError, ValueError):
    """A configuration value is invalid; the message names the field and the value."""


class ActionError(ShortcutGymError, ValueError):
    """An action given to the environment is not one of its actions."""


class InputFileError(ShortcutGymError, FileNotFoundError):
    """An input file the user named does not exist or cannot be read; the message names it."""


class MissingExtraError(ShortcutGymError, ImportError):
    """An optional dependency is not installed; the message names the extra that brings it."""


def require_extra(module: str, extra: str) -> None:
    """Import ``module`` or raise :class:`MissingExtraError` naming ``pip install 'shortcut-gym[extra]'``."""
    import importlib

    try:
        importlib.import_module(module)
    except ImportError as err:
        raise MissingExtraError(f"{module} is not installed ({err}); it comes with the '{extra}' extra: "
                                f"pip install 'shortcut-gym[{extra}]'") from None


class UsageError(ShortcutGymError, RuntimeError):
    """An object was used out of order (e.g. ``step`` before ``reset``); the message says what to call."""


class DataError(ShortcutGymError, ValueError):
    """A table, array or saved file handed to the package is malformed; the message names the column,
    row or file and what is wrong with it."""


class NotReadyError(UsageError, ValueError):
    """An object is asked for something it does not have yet (no bound context, no trained model, no
    kept trials); the message says what to do first. A ValueError too, as it was before."""


class WorldMismatchError(ConfigError):
    """A saved model is used on a world other than the one it was trained on (or its file keeps no
    record of that world); the message names the file, both worlds and the parts that differ."""
