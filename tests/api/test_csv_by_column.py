"""A CSV table written column by column (render.ByColumn, the series answers) is the text the
row-by-row writer gives (render.csv_text, Python's csv module, RFC 4180 quoting and CRLF line
ends): the outside reference is the csv module's writer."""

from __future__ import annotations

import numpy as np

from dualcost.api.render import ByColumn, csv_text


def test_writing_by_column_gives_the_csv_module_s_text() -> None:
    """Floats of every range (whole, tiny, huge, negative zero, NaN for an empty cell), text
    that needs quoting, booleans, integers and None."""
    rng = np.random.default_rng(7)
    n = 9
    floats = rng.normal(size=n) * 10.0 ** rng.integers(-320, 300, n)
    floats[:6] = [np.nan, 0.0, -0.0, 1e16, 1e-5, 2.0]
    columns = [
        [f"2025-{k:02d}" for k in range(1, n + 1)],
        floats,
        np.concatenate(([np.nan], rng.uniform(90, 110, n - 1))),
        ["", "a,b", 'the "river" trout', "x\ny", "plain", "", "z", "q", "r"],
        [True, False, None, True, None, False, True, True, False],
        list(range(n)),
        [None, 1.5, 2.25, None, 3.0, 1e-7, 4.0, 5.0, 6.0],
    ]
    header = ["period", "level", "link", "items", "inside", "count", "mixed"]
    rows = [[c.tolist()[t] if isinstance(c, np.ndarray) else c[t] for c in columns]
            for t in range(n)]
    assert csv_text(header, ByColumn(columns)) == csv_text(header, rows)
    assert csv_text(header, ByColumn([[] for _ in header])) == csv_text(header, [])
