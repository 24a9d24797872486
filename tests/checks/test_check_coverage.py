"""Time coverage: each source's period and the common period."""

from __future__ import annotations

import pandas as pd

from lakefeed.checks._open import Period
from lakefeed.checks.coverage import check_coverage, common_period


def P(a: str, b: str) -> Period:
    return Period(pd.Timestamp(a), pd.Timestamp(b))


def test_common_period_is_latest_start_to_earliest_end() -> None:
    periods = {"weather": P("2020-01-01", "2022-12-31"), "scenes": P("2021-03-01", "2023-06-30")}
    assert common_period(periods) == P("2021-03-01", "2022-12-31")
    (res,) = check_coverage({**periods, "forecast": None})
    assert res.ok and "common period 2021-03-01 .. 2022-12-31 (671 days)" in res.message
    assert "weather 2020-01-01 .. 2022-12-31" in res.message


def test_no_overlap_names_the_sources() -> None:
    (res,) = check_coverage({"weather": P("2020-01-01", "2020-12-31"), "scenes": P("2022-01-01", "2022-12-31")})
    assert not res.ok
    assert "scenes starts 2022-01-01 after weather ends 2020-12-31" in res.message


def test_fewer_than_two_periods_is_skipped() -> None:
    (res,) = check_coverage({"weather": P("2020-01-01", "2020-12-31"), "scenes": None})
    assert res.status == "skipped"
