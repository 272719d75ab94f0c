"""How long reading a CSV upload takes, against Python's bare ``csv.reader`` on the same text.

Run: ``python benchmarks/csv_input_speed.py``. It prints, measured in the same run, the median
time of:

- the baseline: ``list(csv.reader(...))`` over the text, which does no checking at all;
- an index-series panel in long form (``period,item,price,quantity``; 1,000 items by 120 monthly
  periods, 118,800 records, as in series_speed.py) read into arrays with every number checked
  (``inputs.panels.panel_from_csv``), with ',' and '.' (the plain case) and, where the reader
  can, with ';' and decimal commas detected;
- a fit upload in long form (``period,item,price,share,total_expenditure``; 60 items by 400
  periods) read into observations (``inputs.observations.from_csv``);
- a household upload in wide form (10,000 households by 200 items) read into chunks
  (``inputs.households.csv_chunks``), as a household job reads it;

and each one's ratio to the baseline of its own text. The machine is shared and noisy, so the
ratios are the figures to compare between runs (and between versions of the reader).
"""

from __future__ import annotations

import csv
import io
import warnings
from collections.abc import Callable

import numpy as np
from _timing import median_seconds  # benchmarks/, on the path when run as a script
from series_speed import N_ITEMS, N_PERIODS, scenario

from dualcost.api.inputs import households, observations, panels
from dualcost.api.inputs.items import ItemAxis
from dualcost.api.inputs.locator import Locator
from dualcost.api.operations import fits, series

HOUSEHOLDS, HOUSEHOLD_ITEMS, FIT_ITEMS, FIT_PERIODS = 10_000, 200, 60, 400


def panel_text(separator: str = ",", comma: bool = False) -> str:
    periods, items, p, q = scenario()
    lines = [separator.join(["period", "item", "price", "quantity"])]
    for t in range(N_PERIODS):
        for i in range(N_ITEMS):
            if not np.isnan(p[t, i]):
                cells = [periods[t], items[i], repr(float(p[t, i])), repr(float(q[t, i]))]
                if comma:
                    cells[2:] = [c.replace(".", ",") for c in cells[2:]]
                lines.append(separator.join(cells))
    return "\n".join(lines) + "\n"


def fit_text() -> str:
    rng = np.random.default_rng(5)
    lines = ["period,item,price,share,total_expenditure"]
    for t in range(FIT_PERIODS):
        w = rng.dirichlet(np.ones(FIT_ITEMS))
        total = float(rng.uniform(800, 1200))
        for i in range(FIT_ITEMS):
            lines.append(f"{t},item_{i},{float(rng.uniform(1, 9))!r},{float(w[i])!r},{total!r}")
    return "\n".join(lines) + "\n"


def household_text() -> str:
    rng = np.random.default_rng(7)
    shares = rng.dirichlet(np.ones(HOUSEHOLD_ITEMS), size=HOUSEHOLDS)
    lines = ["household," + ",".join(f"item_{i}" for i in range(HOUSEHOLD_ITEMS))]
    lines += [f"h{h}," + ",".join(map(repr, row.tolist())) for h, row in enumerate(shares)]
    return "\n".join(lines) + "\n"


def bare(text: str, separator: str = ",") -> Callable[[], object]:
    return lambda: list(csv.reader(io.StringIO(text), delimiter=separator))


def main() -> None:
    warnings.simplefilter("ignore")
    limits = panels.Limits(10**6, 10**6, 10**9)
    plain, semicolon = panel_text(), panel_text(";", comma=True)
    fit, wide = fit_text(), household_text()
    axis = ItemAxis([f"item_{i}" for i in range(HOUSEHOLD_ITEMS)],
                    [None] * HOUSEHOLD_ITEMS)

    def read_panel(text: str) -> Callable[[], object]:
        return lambda: panels.panel_from_csv(text, limits, series.locator("csv"))

    def read_fit() -> object:
        return observations.from_csv(fit, fits.locator("csv"), max_rows=10**9)

    def read_households() -> object:
        loc = Locator({}, "csv", items=axis.ids)
        reader = csv.reader(io.StringIO(wide))
        layout = households.csv_layout(next(reader), axis, loc, needs_income=False)
        return sum(c.shares.shape[0] for c in households.csv_chunks(reader, layout, 655))

    print(f"CSV uploads read and checked; ratio = time / bare csv.reader on the same text")
    cases: list[tuple[str, Callable[[], object], Callable[[], object]]] = [
        (f"panel, ',' and '.' ({plain.count(chr(10)) - 1:,} records)", read_panel(plain),
         bare(plain)),
        (f"fit, ',' and '.' ({fit.count(chr(10)) - 1:,} records)", read_fit, bare(fit)),
        (f"households, ',' and '.' ({HOUSEHOLDS:,} x {HOUSEHOLD_ITEMS})", read_households,
         bare(wide)),
        ("panel, ';' and decimal commas detected", read_panel(semicolon), bare(semicolon, ";")),
    ]
    for name, read, baseline in cases:
        try:
            read()
        except Exception as exc:  # an older reader refuses this dialect
            print(f"  {name:48s} not read: {type(exc).__name__}")
            continue
        t_base = median_seconds(baseline, 5)
        t_read = median_seconds(read, 5)
        print(f"  {name:48s} {t_read * 1e3:8.1f} ms   baseline {t_base * 1e3:7.1f} ms   "
              f"ratio {t_read / t_base:5.2f}")


if __name__ == "__main__":
    main()
