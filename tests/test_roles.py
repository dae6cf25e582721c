"""Roles: the documented rules, on published datasets and on constructed columns."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from helpers import assert_same_table, run_code

from nbeda.report import Report
from nbeda.stats.roles import compute_roles, role_of


def test_iris_roles():
    """Fisher's iris (1936) as shipped by scikit-learn: four measured features and a class code."""
    from sklearn.datasets import load_iris

    iris = load_iris(as_frame=True).frame
    t = compute_roles(iris)
    assert list(t.loc[[c for c in iris.columns if c != "target"], "role"]) == ["continuous"] * 4
    # the class is coded 0, 1, 2: three levels is too short for a rating-like scale
    assert t.loc["target", "role"] == "discrete"
    assert (t["count"] == 150).all() and (t["missing"] == 0).all()
    assert t.loc["target", "unique"] == 3


def test_penguins_roles_and_counts():
    """Palmer penguins (Gorman, Williams & Fraser 2014), 344 rows as shipped by `palmerpenguins`."""
    from palmerpenguins import load_penguins

    p = load_penguins()
    t = compute_roles(p)
    assert t.loc["species", "role"] == "nominal" and t.loc["species", "unique"] == 3
    assert t.loc["island", "role"] == "nominal"
    assert t.loc["bill_length_mm", "role"] == "continuous"
    assert t.loc["year", "role"] == "discrete"  # 2007, 2008, 2009
    assert (t["count"] + t["missing"] == 344).all()
    assert t.loc["bill_length_mm", "missing"] == 2 and t.loc["sex", "missing"] == 11


@pytest.mark.parametrize(
    ("values", "role"),
    [
        (pd.Series([np.nan, np.nan]), "empty"),
        (pd.Series([], dtype="float64"), "empty"),
        (pd.Series([4, 4, 4]), "constant"),
        (pd.Series([True, False, True]), "boolean"),
        (pd.Series([0, 1, 1, 0]), "boolean"),
        (pd.Series(["Yes", "no", "YES"]), "boolean"),
        (pd.Series(pd.Categorical(["lo", "hi", "lo"], categories=["lo", "hi"], ordered=True)), "ordinal"),
        (pd.Series([1, 2, 3, 4, 5, 3, 2, 4, 5, 1]), "ordinal"),  # a 1–5 scale with repeats
        (pd.Series([0, 1, 2, 0, 1, 2]), "discrete"),  # only three levels
        (pd.Series(np.arange(100) % 15 * 3), "discrete"),  # few levels, not contiguous
        (pd.Series(np.arange(1, 101)), "identifier"),  # monotone, distinct
        (pd.Series(np.random.default_rng(0).integers(0, 1000, 500)), "continuous"),
        (pd.Series([0.5, 1.25, 3.0]), "continuous"),
        (pd.Series(pd.to_timedelta([1, 2, 3], unit="s")), "continuous"),
        (pd.Series(pd.date_range("2024-01-01", periods=5)), "datetime"),
        (pd.Series(["2024-01-05", "2024-02-11", "2024-03-01", None]), "datetime"),
        (pd.Series(["a", "b", "a", "c"]), "nominal"),
        (pd.Series(["k1", "k2", "k3", "k4"]), "identifier"),
        (pd.Series(["a long free-text remark about the bed number %d" % i for i in range(20)]), "text"),
        (pd.Series([[1], [2], [3]]), "text"),
    ],
)
def test_role_rules(values, role):
    assert role_of(values)[0] == role


def test_override_reaches_table_and_code(demo_frame):
    report = Report(demo_frame, roles={"pest_score": "discrete"})
    table = report.roles().table
    assert table.loc["pest_score", "role"] == "discrete"
    assert table.loc["pest_score", "reason"].startswith("set by the user (inferred: ordinal")
    code = report.code("roles")
    assert "'pest_score': 'discrete'" in code
    ns = run_code(code, demo_frame)
    assert_same_table(ns["roles"], table)
    # the override reaches other sections' view of roles too
    assert report.ctx.roles[list(demo_frame.columns).index("pest_score")] == "discrete"


def test_demo_roles(demo_frame):
    t = Report(demo_frame).roles().table
    expect = {
        "plot_id": "identifier",
        "site": "nominal",
        "soil_grade": "ordinal",
        "pest_score": "ordinal",
        "irrigation_l": "continuous",
        "yield_kg": "continuous",
        "organic": "boolean",
        "planted_on": "datetime",
        "network": "constant",
    }
    assert {k: t.loc[k, "role"] for k in expect} == expect


def test_unknown_role_rejected():
    with pytest.raises(ValueError, match="unknown role"):
        Report(pd.DataFrame({"a": [1, 2]}), roles={"a": "weird"})
    with pytest.raises(KeyError, match="no column named"):
        Report(pd.DataFrame({"a": [1, 2]}), roles={"b": "nominal"})


def test_ordinal_override_becomes_an_ordered_categorical_in_every_tab_and_its_code(demo_frame):
    """An ordinal override on text is an ordered Categorical cast (levels sorted), in the
    computation and in every section's emitted code; the user's frame stays as it was."""
    from helpers import assert_unchanged, snapshot

    from nbeda.sections import SECTIONS

    frame = demo_frame.head(600)
    snap = snapshot(frame)
    report = Report(frame, roles={"site": "ordinal"})
    assert report.ctx.frame["site"].cat.ordered
    assert list(report.ctx.frame["site"].cat.categories) == sorted(frame["site"].unique())
    for name in SECTIONS:
        result = report.section(name)
        code = result.code("df")
        if name != "roles":  # Roles describes the frame as given
            assert "pd.Categorical(df.iloc[:, 1], categories=['Eastfield', 'Hilltop'" in code, name
        ns = run_code(code, frame)
        assert_same_table(ns[name], result.table)
    assert_unchanged(frame, snap)
    # Links now pairs the site with the ordinal soil grade by rank correlation
    links = report.links().table
    pair = links[(links["x"] == "site") & (links["y"] == "soil_grade")]
    assert set(pair["measure"]) == {"spearman", "kendall"}
