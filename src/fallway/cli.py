"""The ``fallway`` command line: thin click commands over the library."""

from __future__ import annotations

import click

from . import __version__


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="fallway")
def main() -> None:
    """Minimum-time gravity descent lines across terrain (GeoTIFF DEMs)."""


if __name__ == "__main__":  # pragma: no cover
    main()
