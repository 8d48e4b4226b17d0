"""Errors raised by the numerical core for input it cannot work with."""


class ScienceInputError(ValueError):
    """Bad input to a science function; the message names the problem (the API maps it to HTTP 422)."""
