"""``blotter bench``: time the engine, store, risk and app paths on this machine."""

from __future__ import annotations

import click

from blotter.benchmarks import BENCH_MODULES, DEFAULT_MODULES, Result
from blotter.commands import optional_module
from blotter.commands.common import print_json, print_table


def run_all(quick: bool, only: tuple[str, ...]) -> list[Result]:
    """Results of the default benchmark modules present (or those named in ``only``), in
    order; a bar on a terminal names the group running (``commands.progress``)."""
    from blotter.commands.progress import progress

    names = [name for name in BENCH_MODULES if name in (only or DEFAULT_MODULES)]
    results: list[Result] = []
    with progress("bench", len(names)) as bar:
        for done, name in enumerate(names):
            module = optional_module(f"blotter.benchmarks.{name}")
            if module is None:
                continue
            bar.update(done, f"bench: {name}")
            results.extend(module.run(quick))
    return results


def _fmt_ns(ns: float) -> str:
    if ns != ns:  # NaN: a case that measures something other than time (e.g. memory)
        return ""
    if ns >= 1e6:
        return f"{ns / 1e6:,.1f} ms"
    if ns >= 1e3:
        return f"{ns / 1e3:,.2f} µs"
    return f"{ns:,.1f} ns"


def _fmt_ratio(ratio: float | None, reference: str | None) -> str:
    """'52× vs X' when we are faster; '0.24× vs X' (two digits) when the reference is faster."""
    if not ratio:
        return ""
    return f"{ratio:,.0f}× vs {reference}" if ratio >= 10 else f"{ratio:.2g}× vs {reference}"


@click.command()
@click.option("--json", "as_json", is_flag=True, help="Print {\"results\": [...]} as JSON.")
@click.option("--quick", is_flag=True, help="Small sizes and few repetitions (a smoke test).")
@click.option("--only", multiple=True, type=click.Choice(BENCH_MODULES),
              help="Run only these groups (repeatable); cluster (minutes) runs only when named.")
def bench(as_json: bool, quick: bool, only: tuple[str, ...]) -> None:
    """Time valuation, loading, what-if and scenario grid on random books; medians of one run.

    Each row gives the median time per position (min and max beside it), the target where one is
    set, and where QuantLib is installed the ratio of its per-option loop to ours.
    """
    results = run_all(quick, only)
    if as_json:
        print_json({"results": [r.as_dict() for r in results]})
        return
    rows = [
        (r.case, f"{r.positions:,}", _fmt_ns(r.ns_per_position), _fmt_ns(r.min), _fmt_ns(r.max),
         _fmt_ns(r.target_ns) if r.target_ns else "",
         _fmt_ratio(r.ratio, r.reference), r.note)
        for r in results
    ]
    print_table(["case", "positions", "median/pos", "min", "max", "target", "reference", "note"],
                rows, right=[False, True, True, True, True, True, False, False])


COMMANDS = [bench]
