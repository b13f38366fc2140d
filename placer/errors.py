"""Errors raised for bad input; the command line prints them as one line."""

__all__ = ["PlacerError", "SpecError", "PatternError", "LimitError", "shown"]


class PlacerError(ValueError):
    """Base of every error caused by the user's input rather than by a bug."""


class SpecError(PlacerError):
    """A spec file is malformed or asks for something impossible."""


class PatternError(PlacerError):
    """A pattern file is malformed or disagrees with its spec."""


class LimitError(PlacerError):
    """An input exceeds a size limit the tool enforces before doing any work."""


def shown(value: object, limit: int = 40) -> str:
    """A value from the user's input as an error message quotes it: a string in quotes,
    cut to ``limit`` characters; a number as written (a huge integer by its length);
    anything else (a table, an array, a date) by its kind, never a Python repr.

    Examples
    --------
    >>> shown("MREF"), shown("x" * 100)[-6:], shown(10 ** 400), shown({"a": 1})
    ("'MREF'", 'xxx...', 'a 401-digit number', 'a table')
    """
    if isinstance(value, str):
        return repr(value) if len(value) <= limit else repr(value[:limit])[:-1] + "..."
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        text = str(value)
        return text if len(text) <= 20 else f"a {len(text.lstrip('-'))}-digit number"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list | tuple):
        return "an array"
    return f"a {type(value).__name__}"
