"""Finding what a user typed among firm ids, names and industries (pandas-free).

Ids match as typed, then ignoring case; a value written neutralised (a leading apostrophe
before ``=``, ``+``, ``-`` or ``@``) matches as it was in the panel. What matches nothing gets
"did you mean" suggestions: the closest candidates by edit similarity, ignoring case.
"""

from __future__ import annotations

import difflib
import re
from collections.abc import Iterable, Sequence


def unneutralise(text: str) -> str:
    """A text cell as it was before the formula neutraliser prefixed its apostrophe."""
    from levgap.outputs.cells import is_formula_like

    if text.startswith("'") and is_formula_like(text[1:]):
        return text[1:]
    return text


def resolve(wanted: str, candidates: Iterable[str]) -> str | None:
    """The candidate ``wanted`` names: equal as typed, else equal ignoring case (when only one
    candidate is); ``None`` when none or several are.

    Examples
    --------
    >>> resolve("tr0069", ["TR0069", "TR0070"])
    'TR0069'
    """
    folded: dict[str, list[str]] = {}
    for c in candidates:
        plain = unneutralise(c)
        if plain == wanted:
            return c
        folded.setdefault(plain.casefold(), []).append(c)
    hits = folded.get(wanted.casefold(), [])
    return hits[0] if len(hits) == 1 else None


def _numbers(text: str) -> str:
    """``text`` with each run of digits written without leading zeros (``qx007`` and
    ``qx0007`` are both ``qx7``)."""
    return re.sub(r"\d+", lambda m: str(int(m.group())), text)


def suggest(wanted: str, candidates: Sequence[str], n: int = 3) -> list[str]:
    """Up to ``n`` candidates close to ``wanted`` (ignoring case), closest first.

    A candidate equal to ``wanted`` but for leading zeros of its numbers comes first; a
    candidate of several words is also found by one of its words (``motr`` finds
    ``Motor homes``).

    Examples
    --------
    >>> suggest("TR069", ["TR0069", "TR0169", "ZZ9"])
    ['TR0069', 'TR0169']
    >>> suggest("qx007", ["Qx0207", "Qx0107", "Qx0007"])[0]
    'Qx0007'
    """
    key = wanted.casefold()
    # only candidates of about the same length can be close: keeps this quick on 100k ids
    near = max(2, len(key) // 3)
    pool: dict[str, str] = {}
    for c in candidates:
        plain = unneutralise(c)
        folded = plain.casefold()
        for part in (folded, *(folded.split() if " " in folded else ())):
            if abs(len(part) - len(key)) <= near:
                pool.setdefault(part, plain)
    first = [v for k, v in pool.items() if _numbers(k) == _numbers(key)]
    hits = difflib.get_close_matches(key, list(pool), n=n + len(first), cutoff=0.6)
    return list(dict.fromkeys([*first, *(pool[h] for h in hits)]))[:n]


def did_you_mean(wanted: str, candidates: Sequence[str]) -> str:
    """`` Did you mean X or Y?`` (with a leading space), or an empty text."""
    near = suggest(wanted, candidates)
    if not near:
        return ""
    return " Did you mean " + " or ".join(repr(x) for x in near) + "?"
