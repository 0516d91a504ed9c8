"""The report's layout at laboratory sizes: 2 to 10 analytes, 1 to 100,000 routine samples.

Tables never run past an A4 page (at most a few analytes per table, wide frames split), large
batches are summarised with the full table left to the results file, and values are rounded
to what their standard error supports. The print check needs Chromium and pdftotext
(poppler-utils) and skips without them.
"""

from __future__ import annotations

import re
from decimal import Decimal

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bandsolve.batch.overview import batch_overview, round_to_se, se_decimals
from bandsolve.report import _batch, _sections, render_report, write_report
from bandsolve.report._views import LIST_ROWS
from tests.report_scenarios import printed_text, scenario


def _tables(html: str) -> list[str]:
    return re.findall(r"<table.*?</table>", html, re.S)


def _heads(table: str) -> list[str]:
    return re.findall(r"<th>(.*?)</th>", table)


def _batch_part(html: str) -> str:
    return re.search(r'<section id="batch">(.*?)</section>', html, re.S).group(1)


@pytest.mark.parametrize("m", [2, 4, 6, 10])
def test_small_batch_tables_hold_a_few_analytes_each_with_sample_first_and_flags_last(m):
    s = scenario(m, 12)
    html = _batch._listed(s.batch, s.cal.analytes)
    tables = _tables(html)
    assert len(tables) == -(-m // _batch.ANALYTES_PER_TABLE)  # ceil(m / per table)
    shown = []
    for table in tables:
        heads = _heads(table)
        assert heads[0] == "sample" and heads[-1] == "flag_codes"
        assert len(heads) <= _batch.ANALYTES_PER_TABLE + 2
        shown += heads[1:-1]
        assert len(re.findall(r"<tr><td>", table)) == 12  # every sample in every table
    assert shown == list(s.cal.analytes)


def test_cells_give_estimate_se_and_interval_at_the_se_decimals():
    s = scenario(2, 3)
    row = s.batch.iloc[0]
    analyte = s.cal.analytes[0]
    cell = _batch._cells(s.batch.iloc[:1], analyte)[0]
    # GUM (JCGM 100:2008, 7.2.6): the SE to two significant digits, the value to the same place.
    d = 1 - int(np.floor(np.log10(row[f"{analyte} SE"])))
    assert f"{round(row[analyte], d):.{d}f} ± " in cell
    assert f"{round(row[f'{analyte} low95'], d):.{d}f} to " in cell


def test_large_batch_is_summarised_and_its_counts_match_the_table():
    s = scenario(4, 1000)
    html = _batch.batch_section(s.cal.analytes, s.batch)
    assert "results file" in html and "<tr><td>R0001</td>" not in html
    codes = s.batch["flag_codes"]
    # Counted here with plain pandas string matching, independently of the overview code.
    n_residual = int(codes.str.split(";").apply(lambda c: "residual" in c).sum())
    view = batch_overview(s.batch, s.cal.analytes)
    counts = view.flag_counts.set_index("flag")["samples"]
    assert counts["residual"] == n_residual > 0
    assert view.n_flagged == int((codes != "").sum())
    flagged_ids = set(s.batch.loc[codes != "", "sample"])
    assert set(view.flagged["sample"]) == flagged_ids
    for sample in flagged_ids:  # fewer flagged than the listing cap: every one is named
        assert f"<td>{sample}</td>" in html
    # numpy.quantile is the reference for the distribution columns.
    first = s.cal.analytes[0]
    row = view.distribution.set_index("analyte").loc[first]
    assert row["median"] == pytest.approx(np.quantile(s.batch[first], 0.5))
    assert row["95 %"] == pytest.approx(np.quantile(s.batch[first], 0.95))


def test_flagged_listing_stops_at_the_cap_and_says_how_many_more():
    s = scenario(2, LIST_ROWS + 10)
    table = s.batch.copy()
    table["flag_codes"] = "residual"
    html = _batch.batch_section(s.cal.analytes, table)
    listed = re.findall(r"<td>R\d+</td>", html)
    assert len(listed) == min(len(table), _batch.FLAGGED_LISTED)
    if len(table) > _batch.FLAGGED_LISTED:
        assert f"{len(table) - _batch.FLAGGED_LISTED} more" in html


def test_wide_frames_are_split_into_tables_that_repeat_the_first_column():
    frame = pd.DataFrame({f"c{i}": [i, i + 1] for i in range(20)})
    tables = _tables(_sections.frame_table(frame))
    assert len(tables) > 1
    seen = []
    for table in tables:
        heads = _heads(table)
        assert heads[0] == "c0" and len(heads) <= _sections.MAX_COLUMNS
        seen += heads[1:]
    assert seen == [f"c{i}" for i in range(1, 20)]


@settings(max_examples=80, deadline=None)
@given(st.floats(-1e6, 1e6, allow_nan=False), st.floats(1e-9, 1e5))
def test_rounding_keeps_two_significant_digits_of_the_se(value, se):
    table = pd.DataFrame({"sample": ["s"], "a": [value], "a SE": [se], "a low95": [value - se],
                          "a high95": [value + se]})
    out = round_to_se(table, ["a"]).iloc[0]
    d = int(se_decimals(np.array([se]))[0])
    # GUM 7.2.6: the SE quoted to (at most) two significant digits; the value to the same
    # decimal place, so it moves by at most half a unit of that place.
    digits = Decimal(repr(float(out["a SE"]))).normalize().as_tuple().digits
    assert len(digits) <= 2 or out["a SE"] == 0
    assert abs(out["a"] - value) <= 0.5 * 10.0 ** (-d) * (1 + 1e-9) + 1e-12 * abs(value)


def test_rounding_example_from_the_issue():
    table = pd.DataFrame({"sample": ["s"], "a": [8.180232916782774], "a SE": [0.011],
                          "a low95": [8.156], "a high95": [8.204]})
    out = round_to_se(table, ["a"]).iloc[0]
    assert (out["a"], out["a SE"]) == (8.18, 0.011)  # 0.011 has its last digit at 10⁻³


@pytest.mark.slow
@pytest.mark.parametrize(("m", "n"), [(2, 10), (10, 20), (4, 1000)])
def test_printed_report_keeps_every_column_and_the_flag_codes(m, n, tmp_path):
    s = scenario(m, n)
    path = write_report(s.cal, tmp_path / "r.html", batch=s.batch)
    text = printed_text(path, tmp_path)
    words = set(text.split())
    # What runs past the printable width of an A4 page is clipped and missing from the text;
    # the last column's header and every flag code raised must be on paper.
    last = "flag_codes" if n <= LIST_ROWS else "leverage_ratio"
    assert last in words
    for code in set(";".join(s.batch["flag_codes"]).split(";")) - {""}:
        assert code.split(":")[0] in text, code
    for analyte in s.cal.analytes:
        assert analyte.split(" [")[0] in text.replace("\n", " ")


@pytest.mark.slow
def test_a_batch_of_100000_is_summarised_in_a_page_sized_report():
    s = scenario(4, 100_000)
    html = render_report(s.cal, batch=s.batch)
    assert len(html) < 3_000_000  # figures and summary tables, not 100,000 rows
    part = _batch_part(html)
    assert "100000 spectra predicted" in part and "Results by flag code" in part
    assert len(re.findall(r"<tr>", part)) < 200


def test_flagged_samples_are_listed_worst_first():
    s = scenario(2, 400)
    view = batch_overview(s.batch, s.cal.analytes)
    worst = view.flagged[["residual_ratio", "leverage_ratio"]].max(axis=1).to_numpy()
    assert np.all(np.diff(worst) <= 0)  # non-increasing: farthest beyond a limit first
