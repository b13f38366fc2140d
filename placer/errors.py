"""Errors raised for bad input; the command line prints them as one line."""

__all__ = ["PlacerError", "SpecError", "PatternError", "LimitError"]


class PlacerError(ValueError):
    """Base of every error caused by the user's input rather than by a bug."""


class SpecError(PlacerError):
    """A spec file is malformed or asks for something impossible."""


class PatternError(PlacerError):
    """A pattern file is malformed or disagrees with its spec."""


class LimitError(PlacerError):
    """An input exceeds a size limit the tool enforces before doing any work."""
