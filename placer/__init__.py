"""placer: arrange and grade matched analog devices as arrays of unit fingers or cells."""

__version__ = "0.1.0"

from placer.errors import LimitError as LimitError
from placer.errors import PatternError as PatternError
from placer.errors import PlacerError as PlacerError
from placer.errors import SpecError as SpecError
from placer.pattern import Pattern as Pattern
from placer.pattern import format_pattern as format_pattern
from placer.pattern import parse_pattern as parse_pattern
from placer.pattern import read_pattern as read_pattern
from placer.score import Grade as Grade
from placer.score import grade_pattern as grade_pattern
from placer.spec import Spec as Spec
from placer.spec import load_spec as load_spec
from placer.spec import parse_spec as parse_spec

__all__ = ["__version__", "LimitError", "PatternError", "PlacerError", "SpecError", "Pattern",
           "format_pattern", "parse_pattern", "read_pattern", "Grade", "grade_pattern", "Spec",
           "load_spec", "parse_spec"]
