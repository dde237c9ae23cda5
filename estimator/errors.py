"""The one error family of the `estimator` package."""


class EstimatorError(ValueError):
    """Base class of every error raised on purpose by `estimator`.

    It subclasses `ValueError`: every such error is about a value (a parameter,
    a sample, a file's content) that cannot be used as given.
    """


class ParameterError(EstimatorError):
    """A physical or tuning parameter that is impossible or inconsistent."""


class ProfileError(EstimatorError):
    """A cell profile that cannot be read or does not validate."""
