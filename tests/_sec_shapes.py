"""Invented SEC quarters in the shapes real filings take, written at test time.

Each :class:`Firm` is one invented filer (CIKs 92000xx, invented names) whose balance-sheet
lines, other facts and expected panel values sit side by side. The shapes are the ones found
in the 2010 quarters of the SEC data sets (the real firm whose statement shows each shape is
named in a comment, for the reader; its numbers are reused only where the test says so).
:func:`write_quarter` writes ``sub.txt``, ``pre.txt`` and ``num.txt`` in either layout.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

SUB_HEADER = (
    "adsh cik name sic countryba stprba cityba zipba bas1 bas2 baph countryma stprma cityma "
    "zipma mas1 mas2 countryinc stprinc ein former changed afs wksi fye form period fy fp "
    "filed accepted prevrpt detail instance nciks aciks"
).split()
PRE_HEADER = "adsh report line stmt inpth rfile tag version plabel negating".split()
NUM_CURRENT = "adsh tag version ddate qtrs uom segments coreg value footnote".split()
NUM_OLD = "adsh tag version coreg ddate qtrs uom value footnote".split()

PERIOD = "20201231"
PRIOR = "20191231"
TWO_BACK = "20181231"


@dataclass
class Line:
    """One balance-sheet line: tag, label, value now and a year earlier (None: no fact)."""

    tag: str
    label: str
    now: float | None
    prior: float | None = None
    negating: bool = False
    custom: bool = False


@dataclass
class Firm:
    """One invented filer of the quarter."""

    cik: int
    name: str
    sic: str = "3560"
    form: str = "10-K"
    period: str = PERIOD
    fp: str = "FY"
    filed: str = "20210301"
    lines: list[Line] = field(default_factory=list)
    # (tag, ddate, qtrs, uom, value, segments, coreg, version) beyond the balance-sheet lines
    facts: list[tuple] = field(default_factory=list)
    flows_presented: tuple[str, ...] = ()
    lost: tuple[str, ...] = ()  # presented on the balance sheet, no fact in num.txt

    @property
    def adsh(self) -> str:
        return f"{self.cik:010d}-21-000001"


def flow(tag: str, value: float, ddate: str = PERIOD, uom: str = "USD") -> tuple:
    return (tag, ddate, 4, uom, value, "", "", "")


def instant(tag: str, value: float, ddate: str = PERIOD, uom: str = "USD", segments: str = "",
            coreg: str = "", version: str = "") -> tuple:
    return (tag, ddate, 0, uom, value, segments, coreg, version)


def write_quarter(folder: Path, firms: list[Firm], layout: str = "current") -> Path:
    """Write sub.txt, pre.txt and num.txt of the firms into ``folder`` (created)."""
    folder.mkdir(parents=True, exist_ok=True)
    subs, pres, nums = [], [], []
    for f in firms:
        row = dict.fromkeys(SUB_HEADER, "")
        row.update(adsh=f.adsh, cik=str(f.cik), name=f.name, sic=f.sic, countryba="US",
                   form=f.form, period=f.period, fy=f.period[:4], fp=f.fp, filed=f.filed,
                   accepted=f"{f.filed[:4]}-{f.filed[4:6]}-{f.filed[6:]} 16:00:00.0",
                   fye=f.period[4:], prevrpt="0", detail="0", instance="x.xml", nciks="1")
        subs.append("\t".join(row[h] for h in SUB_HEADER))
        assets_line = 0
        for i, ln in enumerate(f.lines, start=1):
            version = f.adsh if ln.custom else "us-gaap/2020"
            pres.append("\t".join([f.adsh, "2", str(i), "BS", "0", "H", ln.tag, version,
                                   ln.label, "1" if ln.negating else "0"]))
            if ln.tag == "Assets":
                assets_line = i
            if ln.tag in f.lost:
                continue
            for date, value in ((f.period, ln.now), (PRIOR, ln.prior)):
                if value is not None:
                    nums.append((f.adsh, ln.tag, version, date, "0", "USD", "", "", value))
        del assets_line
        for j, tag in enumerate(f.flows_presented, start=1):
            pres.append("\t".join([f.adsh, "4", str(j), "IS", "0", "H", tag, "us-gaap/2020",
                                   tag, "0"]))
        for tag, ddate, qtrs, uom, value, seg, coreg, version in f.facts:
            v = version or ("dei/2020" if tag.startswith("Entity") else "us-gaap/2020")
            nums.append((f.adsh, tag, v, ddate, str(qtrs), uom, seg, coreg, value))
    (folder / "sub.txt").write_text("\t".join(SUB_HEADER) + "\n" + "\n".join(subs) + "\n",
                                    encoding="utf-8")
    (folder / "pre.txt").write_text("\t".join(PRE_HEADER) + "\n" + "\n".join(pres) + "\n",
                                    encoding="utf-8")
    header = NUM_CURRENT if layout == "current" else NUM_OLD
    lines = ["\t".join(header)]
    for adsh, tag, version, ddate, qtrs, uom, seg, coreg, value in nums:
        text = "" if value is None else f"{float(value):.4f}"
        fields = {"adsh": adsh, "tag": tag, "version": version, "ddate": ddate, "qtrs": qtrs,
                  "uom": uom, "segments": seg, "coreg": coreg, "value": text, "footnote": ""}
        if layout == "old" and seg and not coreg:
            continue  # the old layout has no segments: only co-registrant facts remain
        lines.append("\t".join(fields[h] for h in header))
    (folder / "num.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return folder


def basic(cik: int, name: str, debt_lines: list[Line], *, assets: float = 10_000.0,
          **kw: object) -> Firm:
    """A firm with total assets, the given debt lines and equity."""
    lines = [Line("Assets", "Total assets", assets, assets * 0.9), *debt_lines,
             Line("StockholdersEquity", "Total stockholders' equity", assets * 0.4,
                  assets * 0.35)]
    return Firm(cik, name, lines=lines, **kw)  # type: ignore[arg-type]
