"""``spikemeasure columns``: the output columns with their units and definitions."""
from __future__ import annotations

import click

__all__ = ["columns"]


@click.command()
@click.option("--markdown", is_flag=True, help="Print docs/measurements.md.")
def columns(markdown: bool) -> None:
    """List the output columns with their units and definitions."""
    from ..columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS, columns_markdown

    if markdown:
        click.echo(columns_markdown(), nl=False)
        return
    for title, cols in (("spikes.csv", SPIKE_COLUMNS), ("sweeps.csv", SWEEP_COLUMNS),
                        ("cells.csv", CELL_COLUMNS)):
        click.echo(title)
        for c in cols:
            click.echo(f"  {c.name:<24} {c.unit or '-':<6} {c.definition}")
