"""The one link between the deal check and the saved model (``levgap.load_model``).

Pro forma statements become schema-v1 rows; the saved model scores them exactly as
``analyze`` scored the panel (drivers with the saved winsorising limits, values outside the
fitted range flagged, the full-sample fit, band, status, gap and contributions against a peer
profile). Capacity solves call :func:`batch_levels`, which scores each round's statements in
one batch.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import pandas as pd

from levgap.deal.capacity import Problem
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


def batch_levels(model: Any,
                 held: Mapping[Any, Mapping[str, float]]) -> Callable[..., np.ndarray]:
    """A ``levels`` function for :func:`levgap.deal.capacity.solve_capacities`.

    Each problem's ``key`` is ``(group, column)``: ``held[group]`` holds the driver overrides
    (raw values) kept fixed while its statement moves, ``column`` is ``target`` or
    ``band_high``. Every round's statements are scored in one call of the saved model.
    """
    def levels(items: list[tuple[Problem, Statement]]) -> np.ndarray:
        rows = pd.DataFrame([{**m.row(), **held[p.key[0]], "firm_id": f"capacity-{j}"}
                             for j, (p, m) in enumerate(items)])
        scored = model.score(rows)
        at = {(str(r.firm_id), str(r.measure)): r for r in scored.itertuples(index=False)}
        return np.array([float(getattr(at[(f"capacity-{j}", p.measure)], p.key[1]))
                         for j, (p, _) in enumerate(items)])

    return levels
