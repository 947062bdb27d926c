"""The deal check: score a pro forma balance sheet against a fitted peer model.

Modules, from the inputs to the money:

- ``scenario``: the scenario file's keys as data, and their validation (pandas-free, so that
  ``levgap template`` can write the annotated example quickly);
- ``statement``: the pro forma statement lines a scenario gives (debt, equity, cash,
  acquisitions at a price, a merger with another firm of the panel);
- ``credit``: net debt / EBITDA, EBITDA / interest, debt / EBITDA, Altman Z and Z'';
- ``merton``: Merton (1974) distance to default and default probability;
- ``tradeoff``: tax-shield value (Modigliani-Miller 1963, Miller 1977), expected distress cost
  and the grid of debt levels;
- ``capacity``: the debt that brings a firm to its target or its band's top, under the two
  stated conventions, and ``debt_to_target`` for ``targets.csv``.

Every function here is pure: statements, scenarios and numbers in, frozen results out.
"""

from __future__ import annotations
