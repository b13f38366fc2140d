"""A spec made ready for work: read and validated (:mod:`placer.io.spec`), then given the
pitch its unit cell and routing need unless it gives its own (:mod:`placer.layout.pitch`).

These are the loaders the commands and the public API use; the search, the grade and
every output run at the pitch they give.
"""

from __future__ import annotations

from pathlib import Path

from placer.errors import PlacerError, SpecError
from placer.io.spec import Spec, bare_spec, read_spec, read_spec_text
from placer.layout.pitch import check_extent, estimated
from placer.model.lde import FingerGeometry

__all__ = ["load_spec", "parse_spec", "default_spec", "ready", "drawn_geometry"]


def ready(spec: Spec) -> Spec:
    """``spec`` with its estimated pitch (unless it gives one), its span checked.

    Parameters
    ----------
    spec : Spec
        A validated spec (:func:`placer.io.spec.read_spec_text`).

    Returns
    -------
    Spec
        The same spec at the pitch the search runs at.

    Raises
    ------
    SpecError
        When the shipped unit cell cannot be drawn at the spec's sizes.
    LimitError
        When the array would span more than a GDSII coordinate holds.
    """
    try:
        spec = estimated(spec)
    except PlacerError as err:
        raise SpecError(f"{spec.source}: {err}") from None
    check_extent(spec)
    return spec


def load_spec(path: str | Path) -> Spec:
    """Read and validate the spec file at ``path`` and give it its pitch.

    Parameters
    ----------
    path : str or Path
        A spec file (TOML).

    Returns
    -------
    Spec
        The validated spec at the pitch the search runs at.

    Raises
    ------
    SpecError
        With a one-line message naming the file and the problem.
    """
    return ready(read_spec(path))


def parse_spec(text: str, source: str = "<spec>", default_name: str = "placer") -> Spec:
    """Parse and validate spec text and give it its pitch.

    Parameters
    ----------
    text : str
        The spec's TOML text.
    source : str
        What error messages call it (a file name).
    default_name : str
        The block's name when the spec gives none.

    Returns
    -------
    Spec
        The validated spec at the pitch the search runs at.

    Examples
    --------
    >>> spec = parse_spec("[devices]\\nA = 2\\nB = 2\\n")
    >>> spec.counts, spec.array.pitch_given
    ((2, 2), False)
    """
    return ready(read_spec_text(text, source, default_name))


def default_spec(name: str, devices: tuple[str, ...], counts: tuple[int, ...],
                 kind: str = "mos") -> Spec:
    """A spec with every assumption at its documented default, for a bare pattern.

    Parameters
    ----------
    name : str
        The block's name.
    devices : tuple of str
        Device names, in order.
    counts : tuple of int
        Units of each device.
    kind : str
        ``"mos"``, ``"cap"`` or ``"res"``.

    Returns
    -------
    Spec
        The default spec at its estimated pitch.
    """
    return ready(bare_spec(name, devices, counts, kind))


def drawn_geometry(spec: Spec) -> FingerGeometry | None:
    """The MOS finger as placer's shipped cell draws it at ``spec``'s pitch (what the
    layout-dependent figures of a pattern file are measured on), or None for another
    kind or a pitch too small for the cell."""
    from placer.kinds import KINDS
    from placer.layout.block import finger_geometry
    from placer.layout.cells import load_rules, unit_cell

    if not KINDS[spec.kind].fingers:
        return None
    try:
        cell = unit_cell(spec.kind, spec.unit.width_um, spec.unit.length_um,
                         spec.array.pitch_um[0], load_rules(spec.kind))
    except PlacerError:
        return None
    return finger_geometry(cell, spec)
