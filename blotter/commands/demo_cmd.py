"""``blotter demo``: write the invented demo book (or a large synthetic one for benchmarks)."""

from __future__ import annotations

import click

from blotter.commands.common import FiniteRange
from blotter.limits import DEMO_POSITIONS


@click.command()
@click.option(
    "--out",
    "out",
    default="demo.db",
    show_default=True,
    type=click.Path(dir_okay=False),
    help="File to write.",
)
@click.option(
    "--positions",
    type=click.IntRange(min=0, max=int(DEMO_POSITIONS.high)),
    default=None,
    help="Option positions (default 150, the shipped demo); e.g. 100000 for benchmarks.",
)
@click.option("--seed", type=int, default=None, help="Random seed (default: the shipped demo's).")
@click.option(
    "--american-share",
    type=FiniteRange(0.0, 1.0),
    default=None,
    metavar="SHARE",
    help="Make this share (0 to 1) of the options American, drawn at random; default: each "
    "underlying's style (the index European, the others American).",
)
@click.option(
    "--force",
    is_flag=True,
    help="Replace OUT if it is a demo book (never a book holding other trades or marks, nor one "
    "in use).",
)
def demo(
    out: str, positions: int | None, seed: int | None, american_share: float | None, force: bool
) -> None:
    """Write an invented demo book: a fictitious desk, five fictitious underlyings, trades, marks.

    Every name and number in it is made up. With the defaults this writes exactly the shipped
    demo.db.
    """
    from blotter.commands.common import read_only_source
    from blotter.commands.progress import progress
    from blotter.store import StoreError
    from blotter.store.demo import DEMO_SEED, DEMO_STEPS, build_demo, describe

    if (source := read_only_source()) is not None:
        raise click.ClickException(
            f"read-only is on ({source}): `demo` writes a book file, so nothing was written "
            f"to {out}"
        )
    try:
        with progress("building the demo book", len(DEMO_STEPS)) as bar:
            path = build_demo(
                out,
                positions=positions,
                seed=DEMO_SEED if seed is None else seed,
                force=force,
                american_share=american_share,
                progress=bar.update,
            )
        counts = describe(path)
    except StoreError as exc:
        raise click.ClickException(str(exc)) from None
    click.echo(
        f"wrote {path}: fictitious demo book, {counts['option_positions']:,} option positions "
        f"and {counts['positions'] - counts['option_positions']} hedges from "
        f"{counts['trades']:,} trades, {counts['mark_sets']} mark sets"
    )


COMMANDS = [demo]
