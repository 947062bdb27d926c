"""SIC titles shipped with levgap (levgap.industries) and their use in the SEC panel."""

from __future__ import annotations

import os
import subprocess
import sys
import zipfile
from pathlib import Path

import pandas as pd
import pytest

from levgap.industries import major_group_title, sic_title, sic_titles


def test_titles_are_the_secs_for_industries_and_the_manuals_for_major_groups() -> None:
    # Titles as the SEC's EDGAR SIC code list prints them (public U.S. government text).
    assert sic_title("2834") == "PHARMACEUTICAL PREPARATIONS"
    assert sic_title(3711) == "MOTOR VEHICLES & PASSENGER CAR BODIES"
    assert sic_title("0100") == sic_title(100) == "AGRICULTURAL PRODUCTION-CROPS"
    assert sic_title("3711.0") == sic_title("3711")
    # A code the SEC list lacks takes its major group's title (1987 manual, from memory).
    assert sic_title("2899") == major_group_title("2899") == "Chemicals and Allied Products"
    for bad in ("", "0", "abcd", "12345", None, "-1"):
        assert sic_title(bad) is None


def test_the_table_is_complete_and_consistent() -> None:
    table = sic_titles()
    majors = {c for c, (level, _) in table.items() if level == "major_group"}
    industries = {c for c, (level, _) in table.items() if level == "industry"}
    assert len(majors) == 83 and len(industries) == 444
    assert all(len(c) == 2 for c in majors) and all(len(c) == 4 for c in industries)
    assert {c[:2] for c in industries} <= majors  # every industry has its major group
    assert all(title.strip() == title and title for _, title in table.values())


def test_loading_the_titles_needs_no_pandas() -> None:
    code = ("import sys; from levgap.industries import sic_title; sic_title('2834'); "
            "print('pandas' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "False"


def test_every_sic_code_in_the_shared_quarters_has_a_title() -> None:
    root = os.environ.get("LEVGAP_SEC_DATA")
    if not root:
        pytest.skip("LEVGAP_SEC_DATA is not set: this test reads the shared SEC quarters")
    codes: set[str] = set()
    for name in ("2009q3.zip", "2010q1.zip", "2010q2.zip"):
        with zipfile.ZipFile(Path(root) / name) as zf, zf.open("sub.txt") as fh:
            sub = pd.read_csv(fh, sep="\t", dtype=str, keep_default_na=False)
        codes |= {s.zfill(4) for s in sub["sic"] if s.strip() and s != "0"}
    assert codes and all(sic_title(c) is not None for c in codes)
    missing = sorted(c for c in codes if c not in sic_titles())
    assert missing == [], missing  # all are four-digit codes of the SEC's list
