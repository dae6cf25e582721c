"""``%eda`` and ``%%eda`` in a real IPython shell: display, options, code cells and usage errors.

Outside reference: Fisher's iris as shipped by scikit-learn — the cell ``%eda iris --code spread``
puts below must, when run, give the minima and maxima of the summary table in the dataset's own
description (DESCR; min/max only, its means/SDs come from a slightly different copy).
"""

from __future__ import annotations

import contextlib
import io

import pandas as pd
import pytest
from helpers import assert_same_table, assert_unchanged, run_code, snapshot
from IPython.core.error import UsageError
from IPython.core.interactiveshell import InteractiveShell

import nbeda.magics as magics_module
from nbeda.demo import greenhouse
from nbeda.report import Report
from nbeda.sections import SECTIONS
from nbeda.widget import ReportWidget


@pytest.fixture(scope="module")
def beds() -> pd.DataFrame:
    return greenhouse(n=800, seed=1)


@pytest.fixture
def shell(beds, monkeypatch):
    sh = InteractiveShell.instance()
    sh.run_line_magic("load_ext", "nbeda")
    sh.user_ns["df"] = beds
    sh.rl_next_input = None
    shown: list[object] = []
    monkeypatch.setattr(magics_module, "display", lambda obj, *a, **k: shown.append(obj))
    sh.shown = shown  # type: ignore[attr-defined]
    return sh


def test_load_ext_registers_line_and_cell_magics(shell):
    assert shell.find_line_magic("eda") is not None
    assert shell.find_cell_magic("eda") is not None


def test_eda_df_displays_the_report_widget(shell, beds):
    snap = snapshot(beds)
    assert shell.run_line_magic("eda", "df") is None
    (w,) = shell.shown
    assert isinstance(w, ReportWidget)
    assert w.report.frame is beds and w.report.frame_name == "df" and w.report.frame_expr is None
    assert w.state["roles"] == "done" and w.charts == "static"
    assert_unchanged(beds, snap)


def test_expression_with_options(shell, beds):
    shell.run_line_magic("eda", 'df[df.site == "Northgate"] --by crop --tab spread --sample 300 --seed 4')
    (w,) = shell.shown
    r = w.report
    assert r.frame.shape[0] == int((beds["site"] == "Northgate").sum()) > 0
    assert (r.frame["site"] == "Northgate").all()
    assert r.options.by == "crop" and r.options.sample == 300 and r.options.seed == 4
    assert r.initial_tab == "spread" and w.selected == "spread"
    assert r.frame_expr == 'df[df.site == "Northgate"]'


def test_code_goes_to_the_next_cell(shell, beds):
    shell.run_line_magic("eda", "df --code spread")
    assert shell.shown == []  # nothing displayed: the code goes below instead
    expected = Report(beds).code("spread")
    assert shell.rl_next_input == expected
    ns = run_code(shell.rl_next_input, beds, "df")
    assert_same_table(ns["spread"], Report(beds).spread().table)


def test_code_uses_the_variable_name(shell, beds):
    shell.user_ns["plots"] = beds
    shell.run_line_magic("eda", "plots --code Roles --roles pest_score=discrete")
    code = shell.rl_next_input
    assert code == Report(beds, roles={"pest_score": "discrete"}, frame_name="plots").code("roles")
    ns = run_code(code, beds, "plots")
    assert ns["roles"].loc["pest_score", "role"] == "discrete"


def test_code_of_an_expression_names_the_frame_first(shell, beds):
    shell.run_line_magic("eda", 'df[df.site == "Northgate"] --code spread')
    code = shell.rl_next_input
    assert code.startswith('# The frame this analysis is about:\neda_frame = df[df.site == "Northgate"]\n')
    sub = beds[beds["site"] == "Northgate"]
    assert code.endswith(Report(sub, frame_name="eda_frame").code("spread"))
    ns = run_code(code, beds, "df")  # runs where only the user's df exists
    assert_same_table(ns["spread"], Report(sub).spread().table)
    assert ns["df"] is beds  # the user's frame keeps its name and value


def test_all_code_is_one_cell_that_reproduces_every_table(shell, beds):
    shell.run_line_magic("eda", "df --all-code --by site")
    code = shell.rl_next_input
    report = Report(beds, by="site")
    assert code == report.all_code()
    ns = run_code(code, beds, "df")
    checked = []
    for name in SECTIONS:
        try:
            table = report.section(name).table
        except NotImplementedError:
            assert f"# ===== {name.capitalize()} =====" in code
            continue
        assert_same_table(ns[name], table)
        checked.append(name)
    assert {"roles", "spread"} <= set(checked)


def test_cell_magic_reports_on_the_last_expression(shell, beds):
    shell.run_cell_magic("eda", "--tab spread", 'basil = df[df.crop == "basil"]\nbasil')
    (w,) = shell.shown
    assert (w.report.frame["crop"] == "basil").all() and w.selected == "spread"
    assert w.report.frame_name == "basil" and "basil" in shell.user_ns
    shell.run_cell_magic("eda", "--code roles", 'x = 1\ndf.head(50)')
    code = shell.rl_next_input
    assert code.startswith("# The frame this analysis is about:\neda_frame = df.head(50)\n")
    assert_same_table(run_code(code, beds, "df")["roles"], Report(beds.head(50)).roles().table)


def test_cell_magic_errors(shell):
    with pytest.raises(UsageError, match="must end with an expression"):
        shell.run_cell_magic("eda", "", "y = df")
    with pytest.raises(UsageError, match="does not parse"):
        shell.run_cell_magic("eda", "", "df[")
    with pytest.raises(UsageError, match="not a pandas DataFrame"):
        shell.run_cell_magic("eda", "", "3 + 4")


def test_series_is_promoted(shell, beds):
    shell.run_line_magic("eda", "df.yield_kg")
    (w,) = shell.shown
    assert list(w.report.frame.columns) == ["yield_kg"]
    assert w.report.frame["yield_kg"].equals(beds["yield_kg"])


def test_interactive_charts_flag(shell):
    shell.run_line_magic("eda", "df --charts interactive")
    (w,) = shell.shown
    assert w.charts == "interactive" and "<iframe" in w.bodies["roles"]


@pytest.mark.parametrize(
    ("line", "message"),
    [
        ("nowhere", "unknown variable"),
        ("[1, 2, 3]", "is a list, not a pandas DataFrame"),
        ("df --by nowhere", "unknown column 'nowhere'"),
        ("df --target nowhere", "unknown column 'nowhere'"),
        ("df --roles nowhere=nominal", "unknown column 'nowhere'"),
        ("df --tab nowhere", "unknown tab 'nowhere'"),
        ("df --code nowhere", "unknown tab 'nowhere'"),
        ("df --roles site=wizard", "unknown role 'wizard'"),
        ("df --roles site", "column=role pairs"),
        ("df --sample lots", "sample"),
        ("df --confidence 2", "confidence must be in"),
        ("df --charts 3d", "charts"),
        ("", "usage: %eda"),
        ("df.nowhere", "could not evaluate"),
    ],
)
def test_usage_errors(shell, line, message):
    with pytest.raises(UsageError, match=message.replace("%", ".").replace("(", ".").replace(")", ".")):
        shell.run_line_magic("eda", line)
    assert shell.shown == [] and shell.rl_next_input is None


def test_help_shows_every_option_with_an_example(shell):
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        shell.run_cell("%eda?")
    text = out.getvalue()
    for option in ("--tab", "--by", "--target", "--roles", "--sample", "--confidence", "--seed", "--code",
                   "--all-code", "--charts"):  # fmt: skip
        assert option in text, option
    assert "%eda df --code spread" in text and 'df[df.site == "Northgate"]' in text


def test_iris_code_cell_matches_description(shell):
    """Fisher's iris (scikit-learn copy): min/max from the summary table in its DESCR."""
    from sklearn.datasets import load_iris

    iris = load_iris(as_frame=True).frame
    shell.user_ns["iris"] = iris
    shell.run_line_magic("eda", "iris --code spread")
    spread = run_code(shell.rl_next_input, iris, "iris")["spread"]
    assert spread.loc["sepal length (cm)", ["min", "max"]].tolist() == pytest.approx([4.3, 7.9])
    assert spread.loc["petal width (cm)", ["min", "max"]].tolist() == pytest.approx([0.1, 2.5])
