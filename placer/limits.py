"""Every global input limit, checked where the input enters, before any work starts, so
that absurd inputs fail at once with one line (the reason for each value beside it)."""

from __future__ import annotations

__all__ = ["MAX_UNITS", "MAX_SLOTS", "MAX_SIDE", "MAX_DEVICES", "MAX_SLOT_DEVICES",
           "MAX_EXTENT_UM", "MAX_DAC_BITS", "MAX_DAC_WORK", "MAX_MC_UNITS", "MAX_MC_WORK",
           "MAX_NAME", "MAX_NET", "MAX_FILE_BYTES", "MAX_TOML_DEPTH", "MAX_BANDED_DEVICES"]

MAX_UNITS = 65_536
MAX_SLOTS = 262_144
MAX_SIDE = 1024            # rows or columns of a core (a pattern adds its dummy ring)
MAX_DEVICES = 256          # 32 640 pairs
MAX_SLOT_DEVICES = 1 << 24  # slots x devices: the size of the search's per-device fields
MAX_EXTENT_UM = 1e6        # drawn span: GDSII coordinates are int32 of 1 nm (2.1 m)
MAX_DAC_BITS = 16          # the capacitor budget evaluates all 2^bits codes
MAX_DAC_WORK = 1 << 27     # [electrical] mc_samples x 2^bits
MAX_MC_UNITS = 2048        # [monte_carlo] factorises the units' correlation (units^2)
MAX_MC_WORK = 1 << 25      # [monte_carlo] samples x pairs and units x pairs
MAX_NAME = 24
MAX_NET = 32
MAX_FILE_BYTES = 4 * 1024 * 1024
MAX_TOML_DEPTH = 32        # tables, arrays and dotted keys: a spec needs 4
#: devices of one group with a row band: the search keeps each row's devices as bits of
#: one 64-bit mask, with one bit spare
MAX_BANDED_DEVICES = 62
