"""One exception hierarchy for the whole package.

Every error raised on purpose by sahaboltz derives from :class:`SahaboltzError`, so a caller can
catch them all at once.  Messages say what was wrong and how to fix it.
"""


class SahaboltzError(Exception):
    """Root of every error raised on purpose by sahaboltz."""


class InputError(SahaboltzError, ValueError):
    """An argument has a bad value (non-finite, non-positive, wrong shape, unknown option)."""


class UnknownSpeciesError(SahaboltzError, KeyError):
    """A species or element name that the database does not know."""

    def __str__(self) -> str:  # KeyError would quote the message
        return str(self.args[0]) if self.args else ""


class NoDataError(SahaboltzError, LookupError):
    """The species exists but the database holds no data for what was asked."""


class DataFormatError(SahaboltzError, ValueError):
    """A data file is malformed; the message names the file and line."""


class ConvergenceError(SahaboltzError, RuntimeError):
    """An iterative solve did not converge; the message names the failing states."""


class TableError(SahaboltzError):
    """A stored table is damaged, incompatible, or cannot be written."""


class SahaboltzWarning(UserWarning):
    """Root of the warnings sahaboltz issues about its results."""


class ValidityWarning(SahaboltzWarning):
    """Some states lie where the model's assumptions fail (degenerate electrons, strong
    coupling); the message says how many and which limit."""


class TruncationWarning(SahaboltzWarning):
    """An explicitly chosen partition-function truncation misleads at some states (the plain
    sum far above the occupation-weighted one); the message names the species."""
