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
  stated conventions, and ``debt_to_target`` for ``targets.csv``;
- ``distress``: the Merton and trade-off figures of one pro forma statement;
- ``scoring``: the only link to the saved model (``levgap.load_model``);
- ``check``: ``check_deal``, every scenario scored beside the firm as it is;
- ``result``: ``DealCheck`` and the columns of ``proforma.csv``;
- ``api``: ``levgap.proforma(results_dir, firm_id, scenarios)``, which reads the folder.

Everything but ``api`` is pure: statements, scenarios, frames and numbers in, frozen results
out.
"""

from __future__ import annotations
