"""Tables as text for papers: LaTeX (booktabs), Markdown and CSV (pure functions).

- LaTeX: a ``tabular`` with ``\\toprule``/``\\midrule``/``\\bottomrule`` (it needs
  ``\\usepackage{booktabs}``), text from the data escaped, negative numbers with a true
  minus (``$-$``).
- Markdown: a pipe table whose cells escape Markdown's own characters with backslashes,
  never with HTML entities; negative numbers with U+2212.
- CSV: plain numbers with an ASCII minus, so a spreadsheet or a script reads them as numbers
  (significance marks and standard errors in cells of their own, never in parentheses, which
  a spreadsheet would read as a negative number); text cells that a spreadsheet would run as
  a formula are neutralised.

A value that rounds to zero prints without a minus sign at every precision (``--digits 0``
never prints ``-0``).
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Callable, Sequence

from levgap.report.publication import EXPECTED, STARS, Table, sign_symbol, stars

MINUS = "\u2212"

_LATEX_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
                  "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
                  "^": r"\textasciicircum{}", "<": r"\textless{}", ">": r"\textgreater{}"}
_MD_SPECIAL = set("\\`*_{}[]<>#|!")
_PLAIN_NUMBER = re.compile(r"^-?\d+(?:\.\d+)?$")


def number(v: float | None, digits: int, minus: str = "-") -> str:
    """``v`` with ``digits`` decimals and ``minus`` as its sign; never a signed zero."""
    if v is None:
        return ""
    s = f"{v:.{digits}f}"
    if s.startswith("-"):
        body = s[1:]
        return body if not body.strip("0.") else minus + body
    return s


def latex_escape(text: str) -> str:
    """Escape the characters LaTeX treats specially, so ``text`` prints as written."""
    return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in str(text))


def markdown_escape(text: str) -> str:
    """Backslash-escape Markdown's special characters (no HTML entities)."""
    return "".join("\\" + ch if ch in _MD_SPECIAL else ch for ch in str(text))


def _r2(label: str, fmt: str) -> str:
    """R² as each format writes it (the notes say R2, the glossary's labels R²)."""
    text = label.replace("R2", "R²")
    return text.replace("R²", "$R^2$") if fmt == "latex" else text


# -- LaTeX -------------------------------------------------------------------------------


def _latex(t: Table, digits: int) -> str:
    n = len(t.columns)
    out = [r"% levgap regression table; needs \usepackage{booktabs}",
           r"\begin{tabular}{ll" + "c" * n + "}", r"\toprule"]
    out.append(" & & " + " & ".join(t.numbers) + r" \\")
    out.append(f" & {EXPECTED} & " + " & ".join(latex_escape(c) for c in t.columns) + r" \\")
    out.append(r"\midrule")
    for term, sign, cells in t.body:
        est, se = [], []
        for e, s, p in cells:
            marks = stars(p)
            sup = f"^{{{marks}}}" if marks else ""
            est.append(f"${number(e, digits, '-')}{sup}$" if e is not None else "")
            se.append(f"$({number(s, digits, '-')})$" if s is not None and e is not None
                      else "")
        mark = sign_symbol(sign)
        out.append(latex_escape(term) + f" & {'$' + mark + '$' if mark else ''} & "
                   + " & ".join(est) + r" \\")
        out.append(" & & " + " & ".join(se) + r" \\")
    out.append(r"\midrule")
    for lab, cells in t.footer:
        out.append(_r2(latex_escape(lab), "latex") + " & & " + " & ".join(
            f"${number(c, 3, '-')}$" if isinstance(c, float) else latex_escape(c)
            for c in cells) + r" \\")
    out.append(r"\bottomrule")
    note = _r2(latex_escape(t.note), "latex")
    for cut, mark in STARS:
        note = note.replace(f"{mark} p \\textless{{}} {cut:g}", f"$^{{{mark}}}\\,p<{cut:g}$")
    width = 6.0 + 2.2 * n
    out.append(rf"\multicolumn{{{n + 2}}}{{p{{{width:.1f}cm}}}}{{\footnotesize {note}}} \\")
    out.append(r"\end{tabular}")
    return "\n".join(out) + "\n"


# -- Markdown ----------------------------------------------------------------------------


def _md_row(cells: Sequence[str]) -> str:
    return "| " + " | ".join(markdown_escape(c) for c in cells) + " |"


def _markdown(t: Table, digits: int) -> str:
    head = ["", EXPECTED, *[f"{num} {col}" for num, col in zip(t.numbers, t.columns,
                                                                 strict=True)]]
    lines = [_md_row(head), "|:---|:---:|" + "---:|" * len(t.columns)]
    for term, sign, cells in t.body:
        est = [(number(e, digits, MINUS) + stars(p)) if e is not None else ""
               for e, _, p in cells]
        se = [f"({number(s, digits, MINUS)})" if s is not None and e is not None else ""
              for e, s, _ in cells]
        lines.append(_md_row([term, sign_symbol(sign).replace("-", MINUS), *est]))
        lines.append(_md_row(["", "", *se]))
    for lab, cells in t.footer:
        shown = [number(c, 3, MINUS) if isinstance(c, float) else c for c in cells]
        lines.append(_md_row([_r2(lab, "markdown"), "", *shown]))
    return "\n".join(lines) + "\n\n" + markdown_escape(_r2(t.note, "markdown")) + "\n"


# -- CSV ---------------------------------------------------------------------------------


def _safe(cell: str) -> str:
    """Numbers stay numbers; other text a spreadsheet could run gets a leading apostrophe."""
    from levgap.outputs import is_formula_like

    if _PLAIN_NUMBER.match(cell):
        return cell
    return "'" + cell if is_formula_like(cell) else cell


def write_csv(rows: Sequence[Sequence[str]]) -> str:
    """Rows as CSV text, every text cell neutralised (see :func:`_safe`), rows padded."""
    width = max(len(r) for r in rows)
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    for r in rows:
        writer.writerow([_safe(str(c)) for c in r] + [""] * (width - len(r)))
    return buf.getvalue()


def _csv(t: Table, digits: int) -> str:
    rows: list[list[str]] = [["", "expected_sign"] + [x for num in t.numbers
                                                      for x in (num, "")],
                             ["", ""] + [x for col in t.columns for x in (col, "")]]
    for term, sign, cells in t.body:
        rows.append([term, sign] + [x for e, _, p in cells
                                    for x in (number(e, digits), stars(p) if e is not None
                                              else "")])
        rows.append([f"{term} (s.e.)", ""] + [x for e, s, _ in cells
                                               for x in (number(s, digits) if e is not None
                                                         else "", "")])
    for lab, cells in t.footer:
        shown = []
        for c in cells:
            text = number(c, 3) if isinstance(c, float) else str(c)
            shown += [text.replace(",", "") if re.fullmatch(r"[\d,]+", text) else text, ""]
        rows.append([_r2(lab, "csv"), "", *shown])
    rows.append([_r2(t.note, "csv")])
    return write_csv(rows)


FORMATS: dict[str, Callable[[Table, int], str]] = {
    "latex": _latex, "markdown": _markdown, "csv": _csv,
}


def grid(head: Sequence[str], rows: Sequence[Sequence[str | float | None]], *,
         fmt: str = "markdown", digits: int = 3, note: str = "", title: str = "") -> str:
    """A plain table (the first column text, numbers right-aligned) in one of the formats.

    Floats are written with ``digits`` decimals and each format's minus; ``None`` is a
    blank cell; text cells are escaped for the format. LaTeX gets a booktabs ``tabular``
    (with the title as a comment), Markdown a pipe table with the title in bold, CSV the rows
    with the title first.
    """
    if fmt not in FORMATS:
        from levgap.errors import ConfigError

        raise ConfigError(f"format must be one of {sorted(FORMATS)}; got {fmt!r}.")

    def cell(c: str | float | None, minus: str) -> str:
        if c is None:
            return ""
        return number(c, digits, minus) if isinstance(c, float) else str(c)

    if fmt == "csv":
        out = [[title]] if title else []
        out += [list(head)] + [[cell(c, "-").replace(",", "") if isinstance(c, str)
                                and re.fullmatch(r"[\d,]+", c) else cell(c, "-") for c in r]
                               for r in rows]
        if note:
            out.append([note])
        return write_csv(out)
    if fmt == "markdown":
        lines = [f"**{markdown_escape(title)}**", ""] if title else []
        lines.append(_md_row([str(h) for h in head]))
        lines.append("|:---|" + "---:|" * (len(head) - 1))
        lines += [_md_row([cell(c, MINUS) for c in r]) for r in rows]
        if note:
            lines += ["", markdown_escape(note)]
        return "\n".join(lines) + "\n"
    n = len(head)
    tex = [f"% {title}; needs \\usepackage{{booktabs}}" if title else
           r"% needs \usepackage{booktabs}", r"\begin{tabular}{l" + "r" * (n - 1) + "}",
           r"\toprule", " & ".join(latex_escape(h) for h in head) + r" \\", r"\midrule"]
    for r in rows:
        tex.append(" & ".join(
            f"${number(c, digits, '-')}$" if isinstance(c, float) else latex_escape(cell(c, "-"))
            for c in r) + r" \\")
    tex.append(r"\bottomrule")
    if note:
        tex.append(rf"\multicolumn{{{n}}}{{p{{{2.0 + 1.5 * n:.1f}cm}}}}{{\footnotesize "
                   f"{latex_escape(note)}}} \\\\")
    tex.append(r"\end{tabular}")
    return "\n".join(tex) + "\n"
