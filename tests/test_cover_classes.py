"""Cover-class kernels and the class lines of the rules file (the modification rules stay as they were)."""

from __future__ import annotations

import numpy as np
import pytest

from unmix.cover import class_names_of, dominant_class, parse_class_rules, rule_classes
from unmix.errors import InputError, ShapeError
from unmix.io.rules import read_class_rules, read_rules
from unmix.trajectory import parse_rules

TEXT = """# modification and cover classes in one file
loss = gv:decrease & !soil:increase
class wood = gv >= 0.5
class bare = soil > 0.6 & gv < 2e-1
class wood = shade >= .9   # a second line of a class
"""


def test_one_file_holds_both_kinds():
    assert [r.name for r in parse_rules(TEXT)] == ["loss"]
    rules = parse_class_rules(TEXT)
    assert [(r.name, r.line) for r in rules] == [("wood", 3), ("bare", 4), ("wood", 5)]
    assert rules[1].conditions == (("soil", ">", 0.6), ("gv", "<", 0.2))
    assert class_names_of(rules) == ["wood", "bare", "unclassified"]


def test_rule_named_class_is_still_a_modification_rule():
    assert [r.name for r in parse_rules("class = gv:decrease")] == ["class"]
    assert parse_class_rules("class = gv:decrease") == []


def test_first_matching_line_wins_against_a_hand_loop():
    rng = np.random.default_rng(0)
    f = rng.dirichlet([1, 1, 1], size=500)
    f[::50] = np.nan
    rules = parse_class_rules(TEXT)
    got = rule_classes(f, rules, ["gv", "soil", "shade"])
    for px, code in zip(f, got):  # slow, obvious reference
        if np.isnan(px).any():
            assert code == -1
        elif px[0] >= 0.5:
            assert code == 0
        elif px[1] > 0.6 and px[0] < 0.2:
            assert code == 1
        elif px[2] >= 0.9:
            assert code == 0
        else:
            assert code == 2
    dom = dominant_class(f)
    ok = ~np.isnan(f).any(axis=1)
    np.testing.assert_array_equal(dom[ok], np.argmax(f[ok], axis=1))  # numpy argmax
    assert (dom[~ok] == -1).all()


def test_shapes_checked():
    with pytest.raises(ShapeError, match="endmember axis last"):
        rule_classes(np.zeros((4, 2)), parse_class_rules("class a = x > 0"), ["x", "y", "z"])


def test_files_with_class_lines_only(tmp_path):
    p = tmp_path / "classes.txt"
    p.write_text("class wood = gv >= 0.5\n", encoding="utf-8")
    assert read_rules(p, ["gv"]) == []
    assert [r.name for r in read_class_rules(p, ["gv"])] == ["wood"]
    p.write_text("# nothing\n", encoding="utf-8")
    with pytest.raises(InputError, match="holds no rule"):
        read_rules(p)
