"""Lattice search: stencils, the label-setting kernel and its Python front."""
