"""The annotated example scenario file ``deal.toml``, generated from the scenario keys.

``levgap template`` writes it beside the panel template; ``data_templates/deal.toml`` holds
the same text and a test keeps the two identical and checks that it parses. The key reference
at the top is generated from :data:`levgap.deal.scenario.KEYS`, so it cannot drift from what
the reader accepts. The example scenarios are written for the invented demo (``levgap demo``):
firm ``TR0144`` (an ironworks) and its fellow ironworks ``TR0145``.
"""

from __future__ import annotations

import textwrap

from levgap.deal.scenario import KEYS

_KINDS = {
    "text": "text",
    "money": "money >= 0",
    "signed_money": "money, any sign",
    "rate": "fraction",
}
_GROUPS = {
    "scenario": "Naming",
    "move": "Financing and assets",
    "acquisition": "Acquisition of assets at a price (acquire_price is needed with any of them)",
    "merger": "Merger with another firm of the panel",
    "assumption": "Assumptions (here or in [assumptions], which every scenario inherits)",
}

_HEADER = """\
# levgap deal scenarios (TOML): each [[scenario]] table is scored against the saved peer model
# of a results folder, beside the firm as it is ("before"), without refitting anything.
#
#   levgap analyze panel.csv --out results/            # or: levgap demo --out results/
#   levgap proforma results/ TR0144 --scenario deal.toml --out deal-out/
#
# Money is in the results' money unit (the panel's, after [units] scale and fx_rate); rates
# and shares are fractions (0.25 for 25%). A key left out is zero (or the default stated).
# Unknown keys, wrong types and values outside their range stop with one line naming the
# scenario and the key. The firm as it is ("before") is always shown first; a scenario
# without moves reproduces it exactly.
#
# What the outputs assume (also on the page and in proforma.json):
# - debt capacity under two conventions: "funded" (debt buys new assets in the firm's current
#   mix) and "recap" (debt replaces equity bought back at market value);
# - the trade-off: tax shield t_c x D (Modigliani-Miller 1963; Miller 1977 with both personal
#   rates) against expected distress cost = Merton (1974) one-year default probability x
#   distress_cost_share x firm value, over debt levels from 0 to twice the band's top.
# An illustration under stated assumptions, not advice: covenants, ratings and local rules
# decide.
#
# Keys
"""

_EXAMPLE = """\

[assumptions]
tax_rate = 0.25               # corporate tax rate
interest_rate = 0.065         # on new and assumed debt
risk_free_rate = 0.03         # one-year rate for the Merton model
distress_cost_share = 0.15    # the default; Andrade and Kaplan (1998) find 10-20%
# personal_tax_equity = 0.20  # Miller (1977): give both personal rates, or neither
# personal_tax_debt = 0.30
# asset_volatility = 0.25     # default: estimated from the firm's history, flagged

[[scenario]]
name = "bolt-on mill"
description = "Buy a rolling mill for 150, paid with new debt"
debt_raised = 150.0
acquire_price = 150.0
acquire_assets = 120.0        # at fair value; goodwill = 150 - (120 - 10) = 40
acquire_ppe = 80.0
acquire_current_assets = 30.0
acquire_cash = 5.0
acquire_liabilities = 10.0
acquire_current_liabilities = 10.0
acquire_ebitda = 14.0
acquire_ebit = 9.0
acquire_revenue = 90.0

[[scenario]]
name = "merge TR0145"
description = "Buy a fellow ironworks for 250 in cash, funded with new debt"
merge_with = "TR0145"
merge_price = 250.0
debt_raised = 250.0
interest_rate = 0.07          # a scenario's own value overrides [assumptions]

[[scenario]]
name = "recap 200"
description = "Borrow 200 and buy back shares"
debt_raised = 200.0
equity_bought_back = 200.0

[[scenario]]
name = "deleverage"
description = "Issue shares for 100 and repay debt"
equity_issued = 100.0
debt_repaid = 100.0
"""


def _reference() -> str:
    lines = []
    group = None
    width = max(len(k.name) for k in KEYS)
    for k in KEYS:
        if k.group != group:
            group = k.group
            lines.append(f"# {_GROUPS[group]}:")
        text = f"({_KINDS[k.kind]}) {k.meaning}"
        wrapped = textwrap.wrap(text, width=96 - width - 6)
        lines.append(f"#   {k.name:<{width}}  {wrapped[0]}")
        lines.extend(f"#   {'':<{width}}  {w}" for w in wrapped[1:])
    return "\n".join(lines) + "\n"


def deal_template() -> str:
    """The annotated example scenario file.

    Returns
    -------
    str
        TOML text: the key reference (from ``KEYS``) as comments, then example scenarios.
    """
    return _HEADER + _reference() + _EXAMPLE
