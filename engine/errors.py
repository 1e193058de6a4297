"""Error types raised by the engine.

Every message is one line that names what is wrong and what would work, so the
command line and the dashboard can show it as it is.
"""


class LagspaceError(ValueError):
    """Bad input or settings: the message says what is wrong and what would work.

    The message is always one line, whatever line breaks a file name or header brought in.
    """

    def __str__(self) -> str:
        return " ".join(super().__str__().split())


class RecordingError(LagspaceError):
    """A file or array cannot be turned into a usable recording."""


class BundleError(LagspaceError):
    """A bundle is malformed, tampered with, or unsafe to open."""


class Cancelled(Exception):
    """Long work was stopped because its cancel flag was set."""
