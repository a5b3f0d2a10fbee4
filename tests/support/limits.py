"""Bounds shared by tests in several folders."""

# A refusal must come before anything is built: the refused sizes (hidden 30000 or 40000) would
# hold 3.6 GB / 6.4 GB in W_hh alone, so a bound of 1 GB over a bare import separates refusing
# from building, with room for what imports and the allocator add on a busy machine.
LOAD_BOUND_MB = 1000
