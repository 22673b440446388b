"""The unit model: the one place where the circuit's physics lives.

Fit inverts it; design and trim evaluate it forward for candidate parts. Pure functions and
frozen dataclasses only (no printing, no files).

Modules
-------
filter
    The "lc-lowpass" filter: transfer function, second-order figures, state-space simulation.
unit
    The whole unit: rectangular drive + filter → every spec quantity and the electrical stresses.
"""
