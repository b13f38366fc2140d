"""Type stubs of the compiled search loops (placer/search/_native.c)."""

from typing import Any

def anneal(orb_m: Any, orb_h: Any, orb_size: Any, orb_slot: Any, orb_key: Any, key_grid: Any,
           movable: Any, orb_edge: Any, slot_xy: Any, counts: Any, pairs: Any, base: Any,
           base_h: Any, dev_of: Any, fparams: Any, iparams: Any, caps: Any,
           out: Any, field: Any, pinned: Any, allow: Any) -> int: ...
def bnb(orb_m: Any, orb_hi: Any, orb_size: Any, lev_orb: Any, counts_left: Any, pairs: Any,
        classes: Any, base: Any, base_hi: Any, best_dev: Any, fparams: Any, iparams: Any,
        out: Any, allow: Any) -> int: ...
def keys(orb_m: Any, orb_h: Any, counts: Any, pairs: Any, dev_of: Any, base: Any,
         fparams: Any, iparams: Any, out: Any) -> None: ...
