"""Text cells made safe for spreadsheets: the formula neutraliser every tabular writer uses."""

from __future__ import annotations

import re
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pandas loads only when a table is written
    import pandas as pd

FORMULA_PREFIXES: tuple[str, ...] = ("=", "+", "-", "@", "\t", "\r", "＝", "＋", "－", "＠")
"""Leading characters that make a spreadsheet run a cell as a formula (with the fullwidth
forms some spreadsheet programs also accept)."""

_SPACES = " \u00a0\u3000"
_RISKY = "=+@＝＋－＠-"  # '-' last: a literal inside the character class
FORMULA_PATTERN = f"^(?:[\t\r]|[{_SPACES}]*[{_RISKY}])"
"""A cell is neutralised when it starts with a tab or carriage return, or with one of
``= + - @`` (or their fullwidth forms) after any leading spaces."""
_FORMULA = re.compile(FORMULA_PATTERN)


def is_formula_like(text: str) -> bool:
    """Whether a spreadsheet could run ``text`` as a formula (see ``FORMULA_PATTERN``)."""
    return _FORMULA.match(text) is not None


def neutralise(frame: pd.DataFrame) -> pd.DataFrame:
    """Prefix an apostrophe to text cells that a spreadsheet would run as a formula.

    Parameters
    ----------
    frame : pandas.DataFrame

    Returns
    -------
    pandas.DataFrame
        A copy in which every text cell that starts with ``=``, ``+``, ``-``, ``@`` or their
        fullwidth forms (``＝＋－＠``), possibly after spaces, or with a tab or a carriage
        return, starts with ``'`` instead; numbers and other cells are unchanged.

    Examples
    --------
    >>> neutralise(pd.DataFrame({"name": ["=1+1", " =2", "ok"]}))["name"].tolist()
    ["'=1+1", "' =2", 'ok']
    """
    import numpy as np
    import pandas as pd

    out = frame.copy(deep=False)  # columns are replaced, never changed in place
    for col in out.columns:
        s = out[col]
        if isinstance(s.dtype, pd.StringDtype):
            risky = s.str.match(FORMULA_PATTERN).fillna(False).to_numpy(dtype=bool)
            if risky.any():
                out[col] = s.mask(risky, "'" + s)
        elif s.dtype == object:
            vals = s.to_numpy(dtype=object, copy=True)
            hit = np.fromiter((isinstance(v, str) and _FORMULA.match(v) is not None
                               for v in vals), dtype=bool, count=len(vals))
            if hit.any():
                vals[hit] = ["'" + v for v in vals[hit]]
                out[col] = pd.Series(vals, index=s.index, dtype=object)
    return out
