"""The one link between the deal check and the saved model (``levgap.load_model``).

Pro forma statements become schema-v1 rows; the saved model scores them exactly as
``analyze`` scored the panel (drivers with the saved winsorising limits, values outside the
fitted range flagged, the full-sample fit, band, status, gap and contributions against a peer
profile). Capacity solves call :func:`level_function`, which scores one statement at a time.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import pandas as pd

from levgap.deal.statement import Statement

HELD_DRIVERS = ("earnings_volatility",)
"""Drivers a capacity solve holds at the scenario's value: earnings volatility is computed from
the firm's history, which a change of debt does not rewrite."""


def score_rows(model: Any, rows: pd.DataFrame,
               peer_profiles: Mapping[str, pd.DataFrame] | None = None) -> pd.DataFrame:
    """Score schema-v1 rows for every measure of the model.

    Parameters
    ----------
    model : levgap.models.saved.SavedModel
    rows : pandas.DataFrame
        Schema-v1 rows (money in the results' unit).
    peer_profiles : mapping of str to pandas.DataFrame, optional
        Measure -> one row per input row and a column per driver: the peer profile the
        contributions are measured against (the firm's own peers from ``drivers.csv``).

    Returns
    -------
    pandas.DataFrame
        The model's scored rows, one per input row and measure.
    """
    parts = []
    for measure in model.measures:
        profile = None if peer_profiles is None else peer_profiles.get(measure)
        scored = model.score(rows, peer_profile=profile)
        parts.append(scored[scored["measure"] == measure])
    return pd.concat(parts, ignore_index=True)


def level_function(model: Any, measure: str, column: str,
                   held: Mapping[str, float]) -> Callable[[Statement], float]:
    """Statement -> the model's ``column`` (``target`` or ``band_high``) for ``measure``.

    Parameters
    ----------
    model : levgap.models.saved.SavedModel
    measure : {"book", "market"}
    column : {"target", "band_high"}
    held : mapping of str to float
        Driver overrides (raw values) held fixed while the statement moves.
    """
    def level(s: Statement) -> float:
        row = pd.DataFrame([{**s.row(), **held}])
        scored = model.score(row)
        return float(scored.loc[scored["measure"] == measure, column].iloc[0])

    return level
