"""The one error family of the `daq` package."""


class DaqError(Exception):
    """Base class of every error raised on purpose by `daq`."""


class FramingError(DaqError, ValueError):
    """Bytes or a setting that cannot be turned into samples."""


class SourceError(DaqError, OSError):
    """A port or file that cannot be opened, read or written."""


class RunFormatError(DaqError, ValueError):
    """A run folder that is missing, incomplete, corrupt, tampered with or of unknown layout."""
