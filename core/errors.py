"""Error types. Every message names the thing, the rule and the value found.

The command line turns any :class:`RigsideError` into one line and a non-zero exit code.
"""


class RigsideError(ValueError):
    """Base class of all user-facing errors raised by the core."""


class ParamError(RigsideError):
    """A parameter is out of range or inconsistent, e.g.
    "band high edge must be below Nyquist (15000 Hz), got 20000 Hz"."""


class RecordingError(RigsideError):
    """A recording cannot be opened or read as described."""


class SessionError(RigsideError):
    """A session file is missing, truncated, corrupted or does not match its recording."""


class SpikeFileError(RigsideError):
    """A file of spike times cannot be imported."""


class CurationError(RigsideError):
    """A curation operation cannot be applied as asked."""
