"""Industry levels, small industries and their parent groups."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from levgap.groups import WHOLE_SAMPLE, _prefix_index, industry_levels


def _levels(spec: dict[str, int], min_firms: int, years: int = 2):
    """Industries with the given numbers of firms, each firm observed ``years`` times."""
    peer, firm = [], []
    for code, n in spec.items():
        for f in range(n):
            peer += [code] * years
            firm += [f"{code}-{f}"] * years
    return industry_levels(pd.Series(peer), pd.Series(firm), min_firms)


def test_firms_are_counted_once_however_many_years() -> None:
    lv = _levels({"2834": 3, "3711": 6, "3716": 1}, 3, years=4)
    assert list(lv.labels) == ["2834", "3711", "3716"]
    np.testing.assert_array_equal(lv.firms, [3, 6, 1])
    np.testing.assert_array_equal(lv.small, [False, False, True])
    np.testing.assert_array_equal(lv.codes, np.repeat([0, 1, 2], [12, 24, 4]))
    assert lv.codes.dtype == np.int64
    # the same firm id in two industries counts in each
    two = industry_levels(pd.Series(["10", "10", "20"]), pd.Series(["x", "y", "x"]), 1)
    np.testing.assert_array_equal(two.firms, [2, 1])


def test_parent_is_the_longest_shared_prefix_then_the_whole_sample() -> None:
    lv = _levels({"3711": 5, "3720": 5, "3799": 5, "3712": 1, "3810": 1, "2011": 5,
                  "ZZ1": 1, "3": 1}, 5)
    labels = list(lv.labels)
    small = {labels[i]: lv.parent_labels[lv.parent[i]] for i in np.flatnonzero(lv.small)}
    # 3712 shares "371" with 3711; 3810 shares "3" with the 37xx industries; a text label
    # and a one-character code have no prefix to share: the whole sample
    assert small == {"3712": "371", "3810": "3", "ZZ1": WHOLE_SAMPLE, "3": WHOLE_SAMPLE}

    def members(code: str) -> list[str]:
        return list(lv.labels[lv.members[lv.parent[labels.index(code)]]])

    assert members("3712") == ["3711"]
    assert members("3810") == ["3711", "3720", "3799"]
    assert members("ZZ1") == ["2011", "3711", "3720", "3799"]
    assert lv.parent_labels.count(WHOLE_SAMPLE) == 1  # one parent shared by both
    assert (lv.parent[~lv.small] == -1).all()
    assert lv.members.shape == (len(lv.parent_labels), len(labels))
    assert not lv.members[:, lv.small].any()
    assert lv.parent.dtype == np.int64  # documented: integer codes, usable as an index


def test_without_a_large_industry_every_industry_keeps_its_own_effect() -> None:
    lv = _levels({"10": 2, "11": 1}, 5)
    assert not lv.small.any() and (lv.parent == -1).all()
    assert lv.parent_labels == () and lv.members.shape == (0, 2)
    assert lv.small.dtype == bool and lv.members.dtype == bool


def test_the_longest_prefix_is_found_at_every_length() -> None:
    # 3755 shares "37" with 3720 only (no 375x), not just "3" with 3900 too
    lv = _levels({"3720": 5, "3900": 5, "3755": 1, "3901": 1}, 5)
    labels = list(lv.labels)
    i, j = labels.index("3755"), labels.index("3901")
    assert lv.parent_labels[lv.parent[i]] == "37"
    assert list(lv.labels[lv.members[lv.parent[i]]]) == ["3720"]
    assert lv.parent_labels[lv.parent[j]] == "390"


def test_structure_borrows_outright_and_the_record_is_json() -> None:
    lv = _levels({"3711": 5, "3712": 2, "99": 1}, 5)
    p = lv.structure()
    np.testing.assert_array_equal(p.small, lv.small)
    np.testing.assert_array_equal(p.parent, lv.parent)
    assert np.isinf(p.penalty).all() and np.isnan(p.weight).all() and len(p.penalty) == 3
    d = json.loads(json.dumps(lv.to_dict()))
    assert d == {"labels": ["3711", "3712", "99"], "firms": [5, 2, 1],
                 "small": [False, True, True], "parent": [-1, 0, 1],
                 "parent_labels": ["371", WHOLE_SAMPLE], "members": [[0], [0]]}


def test_prefix_index_lists_every_leading_part_of_numeric_codes() -> None:
    assert _prefix_index(["371", "372", "AB1", "4"]) == {"3": [0, 1], "37": [0, 1]}
