"""The search for arrangements that cancel gradients, ranked as ``grade`` reports them.

One public entry, :func:`search`, takes a :class:`Problem` and returns a frozen
:class:`SearchResult`. Inside, one private module per job:

``_problem``    the problem, the keys and the one objective that orders them
``_compiled``   a problem compiled to exact integer orbit moments; keys of an assignment
``_kernel``     the compiled core (``_native.c``, POSIX and C11), or one clear error
``_construct``  symmetric and near-symmetric starts, the fair deal, random starts
``_local``      the compiled Metropolis loop, one stage at a time
``_exact``      branch and bound, the linear bound, assignment counts
``_bounds``     the quadratic bound at a given linear error
``_driver``     stages, restarts, chains, the exact path and the worker process

``baselines`` (public) builds the textbook arrangements on the same problem;
``switching`` (public) places the cells of a unary array and orders their switching (the
textbook orders and a search of its own, scored by :mod:`placer.model.unary`).
"""

from placer.search._bounds import quadratic_bound
from placer.search._compiled import compile_problem, evaluate, orbit_assignment
from placer.search._construct import core_coords, deal
from placer.search._driver import SearchResult, n_restarts, search
from placer.search._problem import (
    DEFAULT_RELATIVE_TIE,
    SYMMETRIES,
    Keys,
    Problem,
    compare,
    rank_key,
)

__all__ = ["Problem", "Keys", "SearchResult", "search", "n_restarts", "compare", "rank_key",
           "keys_of", "core_coords", "deal", "DEFAULT_RELATIVE_TIE", "SYMMETRIES",
           "compile_problem", "evaluate", "orbit_assignment", "quadratic_bound"]


def keys_of(prob: Problem, assign: object) -> Keys:
    """Every key of a slot assignment of ``prob``'s core.

    Parameters
    ----------
    prob : Problem
        The problem whose core the assignment fills.
    assign : array_like of int
        One value per slot in reading order: a device id, -1 (spare) or -2 (unusable).

    Returns
    -------
    Keys
        The keys the search ranks arrangements by.

    Raises
    ------
    ValueError
        When ``assign`` does not fit the core (its length, type or values).
    """
    import numpy as np

    comp = compile_problem(prob)
    return evaluate(comp, orbit_assignment(comp, np.asarray(assign)))
