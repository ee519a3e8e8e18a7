"""Lattice search: minimum-time lines on the terrain lattice.

* :mod:`~fallway.lattice.stencil` - the 8/16/32-neighbour offsets and the geometry of
  their edges (break points, touched cells, sub-segment lengths);
* :mod:`~fallway.lattice.core` - the compiled core both kernels share: binary heap,
  growable label pool, edge walk, compact state index, A* bound, status codes;
* :mod:`~fallway.lattice.kernel` - the ordinary label-setting (time, energy) search;
* :mod:`~fallway.lattice.robust` - the robust search (one energy per friction case) and
  its LO-energy floor;
* :mod:`~fallway.lattice.search` - the typed fronts :func:`~fallway.lattice.search.lattice_line`,
  :func:`~fallway.lattice.search.reach` and
  :func:`~fallway.lattice.search.robust_lattice_line`: validation, casting, the kernels'
  status turned into results and :class:`~fallway.errors.NoFeasibleLine` reasons.
"""
