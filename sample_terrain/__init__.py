"""The bundled, invented sample site (see README.md in this folder)."""
