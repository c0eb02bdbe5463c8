"""Ranges in typed data: ``data year = 1851:1962``, ``data dose = 0:100:5``, mixed with
values (``data x = 1, 2, 5:8``); both ends included.

The values a range stands for are checked against numpy.arange / numpy.linspace
(general-purpose library) and against the ends typed; bad ranges give one line
naming the value and the rule, and leave the session as it was."""

from __future__ import annotations

import io

import numpy as np
import pytest

from engine.data import MAX_TYPED_VALUES, typed_column
from engine.errors import DataError
from engine.workspace import Workspace
from shell.app import App
from shell.printer import Printer


def test_a_range_includes_both_ends():
    got = typed_column("year", ["1851:1962"])
    assert np.array_equal(got, np.arange(1851, 1963))  # numpy.arange excludes its end
    assert got[0] == 1851 and got[-1] == 1962 and got.size == 112


def test_a_step_and_values_mixed_with_ranges():
    assert np.array_equal(typed_column("dose", ["0:100:5"]), np.linspace(0, 100, 21))
    assert np.array_equal(typed_column("x", ["1", "2", "5:8", "10"]), [1, 2, 5, 6, 7, 8, 10])
    # a decimal step ends exactly on the end typed (not 0.30000000000000004)
    got = typed_column("p", ["0.1:0.3:0.1"])
    assert got.size == 3 and got[-1] == 0.3
    assert np.allclose(got, np.linspace(0.1, 0.3, 3), rtol=1e-15)
    # a range of one value
    assert np.array_equal(typed_column("k", ["7:7"]), [7.0])


@pytest.mark.parametrize("texts, pattern", [
    (["5:1"], r"data `x` value 1: range `5:1` runs backwards; write the smaller end first "
              r"\(1:5\)"),
    (["1", "10:0:2"], r"data `x` value 2: range `10:0:2` runs backwards; .*\(0:10:2\)"),
    (["0:1:0.3"], r"data `x` value 1: range `0:1:0.3` does not end on a step: \(1 - 0\)/0.3 "
                  r"= 3.33333 steps, not a whole number"),
    (["0:10:0"], r"range `0:10:0` needs a step > 0"),
    (["0:10:-2"], r"range `0:10:-2` needs a step > 0"),
    (["1:2000000"], r"range `1:2000000` has 2,000,000 values; at most 1,000,000 may be typed"),
    (["1:2:3:4"], r"range `1:2:3:4` has 4 parts; write LO:HI or LO:HI:STEP"),
    (["1:"], r"range `1:` is missing its end"),
    ([":5"], r"range `:5` is missing its start"),
    (["1:5:"], r"range `1:5:` is missing its step"),
    (["3", ":", "8"], r"data `x` value 2: `:` alone is not a value; write a range without "
                      r"blanks, as 5:8"),
    (["a:5"], r"data `x` value 1 \(the start of range `a:5`\): `a` is not a number"),
    (["1:inf"], r"\(the end of range `1:inf`\): `inf` is not a finite number"),
    (["1:600000", "1:600000"], r"data `x` has more than 1,000,000 values \(at value 2\)"),
])
def test_bad_ranges_are_one_line_naming_the_value(texts, pattern):
    with pytest.raises(DataError, match=pattern):
        typed_column("x", texts)


def test_the_bound_is_the_one_documented():
    assert typed_column("x", [f"1:{MAX_TYPED_VALUES}"]).size == MAX_TYPED_VALUES


def test_ranges_through_the_workspace_and_append():
    ws = Workspace()
    ws.data_typed("year", ["1851:1860"])
    ws.data_append("year", ["1861:1865", "1870"])
    assert np.array_equal(ws.state.data.values("year"), list(range(1851, 1866)) + [1870])


def test_the_shell_reads_a_range_and_a_bad_one_leaves_the_session_as_it_was():
    out, err = io.StringIO(), io.StringIO()
    app = App(Printer(out, err, width=80, color=False))
    assert app.run("data year = 1851:1962") != "error"
    assert app.ws.state.data.values("year").size == 112
    assert app.run("data year = 1962:1851") == "error"
    lines = err.getvalue().strip().splitlines()
    assert len(lines) == 1
    assert "range `1962:1851` runs backwards" in lines[0]
    # the column typed before is still there, unchanged
    assert app.ws.state.data.values("year").size == 112
    assert app.run("help data") != "error"
    assert "LO:HI:STEP" in out.getvalue()
