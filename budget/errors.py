"""User-facing error families.

Each one carries a single sentence a user can act on: what is wrong (naming the file,
variable or vertex) and what to do about it.  The command line prints the message and exits
non-zero; the dashboard shows it in a visible banner.  Anything else that escapes is a bug.
"""


class FluxfenceError(Exception):
    """Base of every problem a user can fix by changing their input or request."""

    exit_code = 2


class FieldsError(FluxfenceError):
    """The gridded input: files, variables, units, coordinates."""

    exit_code = 3


class RegionError(FluxfenceError):
    """The region: polygon geometry, file format, feature selection, domain coverage."""

    exit_code = 4


class RequestError(FluxfenceError):
    """The request itself: options, time window, output paths, method names."""

    exit_code = 5


class ResumeMismatch(RequestError):
    """A resume folder holds the finished steps of another run; ``path`` names the folder."""

    def __init__(self, message: str, path=None):
        super().__init__(message)
        self.path = path
