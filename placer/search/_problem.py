"""The search problem, the keys it ranks and the one objective that orders them.

Named tolerances live here; nothing else in the search compares keys.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass, field
from itertools import combinations
from typing import Any

import numpy as np
from numpy.typing import NDArray

from placer.limits import MAX_BANDED_DEVICES

__all__ = [
    "Problem",
    "Keys",
    "LINEAR_REL",
    "DEFAULT_RELATIVE_TIE",
    "compare",
    "progressed",
    "rank_key",
    "best_of",
    "SYMMETRIES",
    "MAX_BANDED_DEVICES",
]

IntArray = NDArray[np.int64]

#: Linear terms come from integer sums: they are equal when they agree to rounding.
LINEAR_REL = 1e-12
#: Default relative tie of the other keys: values within this fraction count as equal.
DEFAULT_RELATIVE_TIE = 1e-9
#: Symmetry a result must obey: none, mirror about a vertical axis ("x": left-right),
#: about a horizontal axis ("y": top-bottom), or through the centre ("point").
SYMMETRIES = ("none", "x", "y", "point")


@dataclass(frozen=True, eq=False)
class Problem:
    """What the search needs: units, the usable slots of the core, and the objective.

    Slots are numbered in reading order over a ``rows`` x ``cols`` grid; ``usable``
    masks out keep-out slots (None: all usable); ``pinned`` fixes (slot, device) pairs;
    ``pairs`` lists the device pairs whose errors are ranked (None: every pair);
    ``symmetry`` is a constraint every result obeys; ``device_rows`` confines each device
    to some rows (None: anywhere).
    """

    counts: tuple[int, ...]
    rows: int
    cols: int
    pitch_um: tuple[float, float] = (1.0, 1.0)
    linear_ppm_per_um: float = 10.0
    quadratic_ppm_per_um2: float = 0.02
    corr_sigma_ppm: float = 100.0
    corr_length_um: float = 10.0
    kernel: str = "exponential"
    cancel_order: int = 2
    objective: str = "lexicographic"
    relative_tie: float = DEFAULT_RELATIVE_TIE
    open_edge: tuple[bool, ...] | None = None
    finger_nets: tuple[tuple[int, int], ...] | None = None
    #: the dummy net's number when MOS fingers go two to a diffusion island: the
    #: fingers a row leaves unpaired (whose diffusion differs) take the place of the
    #: diffusion breaks in the last key
    pair_dummy: int | None = None
    usable: tuple[bool, ...] | None = None
    pinned: tuple[tuple[int, int], ...] = ()
    pairs: tuple[tuple[int, int], ...] | None = None
    symmetry: str = "none"
    device_rows: tuple[tuple[int, ...] | None, ...] | None = None
    holes: bool = True
    meta: dict[str, Any] = field(default_factory=dict)

    @property
    def n_slots(self) -> int:
        """Slots of the grid, usable or not."""
        return self.rows * self.cols

    @property
    def n_dev(self) -> int:
        """Devices."""
        return len(self.counts)

    def usable_mask(self) -> NDArray[np.bool_]:
        """Usable slots, shape (n_slots,)."""
        if self.usable is None:
            return np.ones(self.n_slots, dtype=bool)
        return np.array(self.usable, dtype=bool)

    def pair_array(self) -> IntArray:
        """The ranked device pairs, shape (n_pairs, 2)."""
        pairs = (self.pairs if self.pairs is not None
                 else tuple(combinations(range(self.n_dev), 2)))
        return np.array(pairs, dtype=np.int64).reshape(-1, 2)

    def allowed_mask(self) -> NDArray[np.int64]:
        """Per slot, a bit for each device allowed there (bit n_dev: a spare slot)."""
        n = self.n_slots
        full = (1 << (self.n_dev + 1)) - 1 if self.n_dev < MAX_BANDED_DEVICES else -1
        out = np.full(n, full, dtype=np.int64)
        if self.device_rows is None:
            return out
        if self.n_dev >= MAX_BANDED_DEVICES:
            raise ValueError(f"row bands need at most {MAX_BANDED_DEVICES - 1} devices")
        rows = np.arange(n) // self.cols
        for d, band in enumerate(self.device_rows):
            if band is not None:
                out[~np.isin(rows, band)] &= ~(1 << d)
        return out

    def n_spare(self) -> int:
        """Usable slots no unit takes (they become dummies)."""
        return int(self.usable_mask().sum()) - sum(self.counts)


@dataclass(frozen=True)
class Keys:
    """What the search ranks, worst pair of each term: linear (um), quadratic (ppm),
    higher orders (um^k), edge-share gap, correlated sigma (ppm), routing effort."""

    linear_um: float
    quadratic_ppm: float
    higher: tuple[float, ...]
    edge_imbalance: float
    sigma_ppm: float
    tracks: int
    breaks: int = 0

    def systematic_ppm(self, prob: Problem) -> float:
        """Linear plus quadratic error in ppm (the weighted objective's first term)."""
        return self.linear_um * prob.linear_ppm_per_um + self.quadratic_ppm


def _cmp(a: float, b: float, rel: float) -> int:
    """-1, 0 or 1: a below, equal to (within ``rel`` of the larger) or above b."""
    if abs(a - b) <= rel * max(abs(a), abs(b)):
        return 0
    return -1 if a < b else 1


def _lexicographic(prob: Problem, x: Keys, y: Keys, rel: float | None = None) -> int:
    rel = prob.relative_tie if rel is None else rel
    for a, b, r in ((x.linear_um, y.linear_um, LINEAR_REL),
                    (x.quadratic_ppm, y.quadratic_ppm, rel),
                    *((hx, hy, rel) for hx, hy in zip(x.higher, y.higher, strict=True)),
                    (x.edge_imbalance, y.edge_imbalance, 1e-9),
                    (x.sigma_ppm, y.sigma_ppm, rel)):
        c = _cmp(a, b, r)
        if c:
            return c
    return (x.tracks + x.breaks > y.tracks + y.breaks) - (x.tracks + x.breaks
                                                          < y.tracks + y.breaks)


def _weighted(prob: Problem, x: Keys, y: Keys, rel: float | None = None) -> int:
    rel = prob.relative_tie if rel is None else rel
    c = _cmp(x.systematic_ppm(prob), y.systematic_ppm(prob), rel)
    if c:
        return c
    return _lexicographic(prob, x, y, rel)


_OBJECTIVES: dict[str, Callable[..., int]] = {
    "lexicographic": _lexicographic,
    "weighted": _weighted,
}


def compare(prob: Problem, x: Keys, y: Keys, rel: float | None = None) -> int:
    """Order two sets of keys under the problem's objective.

    Lexicographic: linear (equal to rounding), then quadratic, the higher orders asked
    for, edge balance and sigma (each equal within the relative tie), then routing
    effort. Weighted: linear + quadratic in ppm (spec magnitudes) first, then the same.

    Parameters
    ----------
    prob : Problem
        Its objective and relative tie decide.
    x, y : Keys
        The keys to compare.
    rel : float, optional
        Replaces the problem's relative tie (the linear term keeps its own).

    Returns
    -------
    int
        -1 if ``x`` is better than ``y``, 0 if tied, else 1.

    Examples
    --------
    >>> p = Problem((2, 2), 1, 4)
    >>> a = Keys(0.0, 1.0, (), 0.0, 5.0, 2)
    >>> b = Keys(0.0, 1.0 + 1e-12, (), 0.0, 4.0, 2)
    >>> compare(p, a, b)      # quadratic tied within 1e-9 of the value: sigma decides
    1
    """
    return _OBJECTIVES[prob.objective](prob, x, y, rel)


def progressed(prob: Problem, new: Keys, old: Keys, rel: float) -> bool:
    """True if ``new`` beats ``old`` on the moment keys by more than ``rel`` (relative):
    the linear term, else the quadratic, else the higher orders (weighted: their ppm
    sum). The later keys (edge balance, sigma, routing) never count as progress."""
    if prob.objective == "weighted":
        return _cmp(new.systematic_ppm(prob), old.systematic_ppm(prob), rel) < 0
    for a, b, r in ((new.linear_um, old.linear_um, LINEAR_REL),
                    (new.quadratic_ppm, old.quadratic_ppm, rel),
                    *((x, y, rel) for x, y in zip(new.higher, old.higher, strict=True))):
        c = _cmp(a, b, r)
        if c:
            return c < 0
    return False


def rank_key(prob: Problem) -> Callable[[Keys], Any]:
    """A sort key ordering Keys best first.

    Parameters
    ----------
    prob : Problem
        Whose objective orders them (:func:`compare`).

    Returns
    -------
    callable
        For ``sorted(..., key=...)`` over :class:`Keys`.
    """
    return functools.cmp_to_key(lambda x, y: compare(prob, x, y))


def best_of(prob: Problem, items: list[Any], keys: Callable[[Any], Keys]) -> Any:
    """The best item (the first of equals)."""
    best = items[0]
    for item in items[1:]:
        if compare(prob, keys(item), keys(best)) < 0:
            best = item
    return best
