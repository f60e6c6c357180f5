"""The tool's own exceptions: a user error ends with exit status 2 and one message."""

from __future__ import annotations


class UserError(Exception):
    """Something the user can fix (bad config, missing file, refused overwrite).

    The command line prints ``str(error)`` and exits with status 2, no traceback.
    """


class ConfigError(UserError):
    """A config value is missing, unknown, mistyped or out of range.

    The message always names the file, the key, what was wrong and what is allowed.
    """

    def __init__(self, source: str, key: str, problem: str, fix: str = "") -> None:
        self.source, self.key, self.problem, self.fix = source, key, problem, fix
        text = f"{source}: {key}: {problem}" if key else f"{source}: {problem}"
        if fix:
            text += f" ({fix})"
        super().__init__(text)


class RunFileError(UserError):
    """A path given as a run file is missing, not an mdgas run file, or damaged."""


class InstabilityError(Exception):
    """The simulation became unphysical (NaN, energy blow-up, particle lost).

    Raised by the driver; the data recorded so far is kept and the run file is
    marked ``failed`` with this message.
    """


class RunInterrupted(UserError):
    """A run stopped on SIGINT/SIGTERM after writing a checkpoint; the command line
    prints the message (which says how to resume) and exits with status 130."""

    exit_status = 130
