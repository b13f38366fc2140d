"""Errors raised for bad input; the command line prints them as one line.

Every error placer raises for its input (not for a bug) is a :class:`PlacerError`, so one
handler catches them all::

    PlacerError (ValueError)
    +-- SpecError          a spec file
    +-- PatternError       a pattern file
    +-- LayoutError        a hand layout (CSV or GDSII)
    +-- TemplateError      a unit-cell template, a layer map or the user's unit cell
    +-- LimitError         a size limit checked before any work
    +-- InfeasibleError    constraints no arrangement can meet together
    +-- RouteError         a pattern that cannot be wired at its pitch
    +-- OutputError        an output folder or file that cannot be written as asked
    +-- CoreMissing        the compiled search core is not installed
    +-- ExerciseError      a lesson page's exercise file
"""

__all__ = ["PlacerError", "SpecError", "PatternError", "LayoutError", "TemplateError",
           "LimitError", "InfeasibleError", "RouteError", "OutputError", "CoreMissing",
           "ExerciseError", "shown"]


class PlacerError(ValueError):
    """Base of every error caused by the user's input rather than by a bug."""


class SpecError(PlacerError):
    """A spec file is malformed or asks for something impossible."""


class PatternError(PlacerError):
    """A pattern file is malformed or disagrees with its spec."""


class LayoutError(PlacerError):
    """A layout file cannot be read or does not describe a unit array."""


class TemplateError(PlacerError):
    """A template or layer map is malformed."""


class LimitError(PlacerError):
    """An input exceeds a size limit the tool enforces before doing any work."""


class InfeasibleError(PlacerError):
    """No arrangement meets the pins, row bands, symmetry and counts together."""


class RouteError(PlacerError):
    """The pattern cannot be wired at the spec's pitch."""


class OutputError(PlacerError):
    """An output folder or file cannot be written as asked."""


class CoreMissing(PlacerError):
    """The compiled search core was not built with this installation."""


class ExerciseError(PlacerError):
    """An exercise file of the lesson page is malformed or does not fit its spec."""


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
