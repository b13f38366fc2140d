"""The files of each command's output set, written into a staged set
(:class:`placer.io.staging.OutputSet`)."""

from __future__ import annotations

from placer.io.staging import OutputSet
from placer.layout.block import Block, library
from placer.layout.gdswrite import write_gds
from placer.model.grade import Grade
from placer.present.plot import save_preview

__all__ = ["write_block"]


def write_block(block: Block, grade: Grade, out: OutputSet, stem: str,
          gradient: tuple[float, float] | None = None,
          moved: tuple[tuple[int, int], ...] = ()) -> list[str]:
    """Stage ``<stem>.gds``, ``.png`` and ``.svg``; return the names written. ``moved``
    slots are outlined in the pictures."""
    lib = library(block)
    names = [f"{stem}.gds", f"{stem}.png", f"{stem}.svg"]
    write_gds(lib, out.path(names[0]))
    save_preview(block.pattern, block.spec.array.pitch_um, grade, block.spec.name,
                 [out.path(names[1]), out.path(names[2])], gradient=gradient,
                 cell_extent=block.cell.extent, moved=moved)
    return names
