"""The one link between the deal check and the saved model (``levgap.load_model``).

Pro forma statements become schema-v1 rows; the saved model scores them exactly as
``analyze`` scored the panel (drivers with the saved winsorising limits, values outside the
fitted range flagged, the full-sample fit, band, status, gap and contributions against a peer
profile). Each round of the capacity search is one batch of statements for the model
(:func:`capacity_rows`, :func:`read_levels`).
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


def capacity_rows(items: list[tuple[Problem, Statement]],
                  held: Mapping[Any, Mapping[str, float]]) -> pd.DataFrame:
    """Schema-v1 rows of the statements a capacity round needs, each under an id of its own,
    with the driver overrides (raw values) its scenario holds fixed (``held[key[0]]``)."""
    return pd.DataFrame([{**m.row(), **held[p.key[0]], "firm_id": f"capacity-{j}"}
                         for j, (p, m) in enumerate(items)])


def read_levels(scored: pd.DataFrame, items: list[tuple[Problem, Statement]]) -> np.ndarray:
    """The level each problem seeks (``key[1]``: ``target`` or ``band_high``), for its measure,
    from the scored :func:`capacity_rows`."""
    at = {(str(r.firm_id), str(r.measure)): r for r in scored.itertuples(index=False)
          if str(r.firm_id).startswith("capacity-")}
    return np.array([float(getattr(at[(f"capacity-{j}", p.measure)], p.key[1]))
                     for j, (p, _) in enumerate(items)])


def batch_levels(model: Any,
                 held: Mapping[Any, Mapping[str, float]]) -> Callable[..., np.ndarray]:
    """A ``levels`` function for :class:`levgap.deal.capacity.CapacitySearch`: every round's
    statements scored in one call of the saved model."""
    def levels(items: list[tuple[Problem, Statement]]) -> np.ndarray:
        return read_levels(model.score(capacity_rows(items, held)), items)

    return levels
