"""The one number formatter: plain numbers at ordinary magnitudes, everywhere."""

import math

import numpy as np
import pandas as pd
import pytest

from hedgerow._format import PLAIN_RANGE, format_number
from hedgerow.report._numbers import number
from hedgerow.widgets._style import fmt


@pytest.mark.parametrize("value, digits, text", [
    (1755.174155439428, 4, "1755"),   # a coordinate seen on screen as 1.76e+03
    (1755.174155439428, 3, "1755"),   # whole digits are never dropped
    (2999.5, 3, "3000"),              # not 3e+03
    (2999.5, 5, "2999.5"),
    (0.5, 4, "0.5"),
    (-0.0012345, 4, "-0.001234"),
    (12.0, 4, "12"),
    (-0.00001, 3, "-1e-05"),          # below the plain range: scientific
    (2.5e9, 3, "2.5e+09"),            # above it: scientific
    (0.0, 4, "0"),
    (-0.0, 4, "0"),
    (-0.00004, 1, "-4e-05"),
])
def test_plain_numbers_at_ordinary_magnitudes(value, digits, text):
    assert format_number(value, digits) == text


@pytest.mark.parametrize("value", [None, "abc", float("nan"), float("inf"), -np.inf, object()])
def test_missing_or_non_finite_reads_dash(value):
    assert format_number(value) == "-"


def test_integers_and_booleans_in_full():
    assert format_number(1234567) == "1234567"
    assert format_number(np.int64(-42)) == "-42"
    assert format_number(True) == "True"
    assert format_number(np.bool_(False)) == "False"


def test_text_round_trips_to_the_stated_precision():
    rng = np.random.default_rng(7)
    lo, hi = np.log10(PLAIN_RANGE[0]), np.log10(PLAIN_RANGE[1])
    values = np.sign(rng.normal(size=400)) * 10 ** rng.uniform(lo, hi - 1e-9, size=400)
    for v in values:
        text = format_number(v, 4)
        assert "e" not in text
        # at least 4 significant digits: relative error at most half a unit in the 4th
        assert abs(float(text) - v) <= 0.5e-3 * abs(v) * (1 + 1e-9), (v, text)
    for v in (1e-9, 3.3e-5, 7e7, 1e300):
        assert "e" in format_number(v)
        assert math.isclose(float(format_number(v, 6)), v, rel_tol=1e-5)


def test_views_and_report_share_the_rule():
    rng = np.random.default_rng(3)
    for v in list(10 ** rng.uniform(-6, 9, size=100)) + [None, np.nan, 7, 0.0]:
        assert fmt(v) == format_number(v) == number(v)
        assert fmt(v, 3) == number(v, 3)
    assert number(0.123, percent=True) == "+12.3%"


def test_readout_tables_use_the_plain_rule():
    from hedgerow.diagnostics._report import ReportMixin

    class _Readout(ReportMixin):
        def to_frame(self):
            return pd.DataFrame({"prediction": [1755.174155439428], "half-width": [2999.5]})

    page = _Readout()._repr_html_()
    assert "1755" in page and "e+03" not in page
