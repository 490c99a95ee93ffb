"""Property checks of the OMA arithmetic and of the PMD-table parser on any input."""

from __future__ import annotations

import math

from hypothesis import given, settings
from hypothesis import strategies as st

from lightwarden.rules.catalogue import (
    COLUMNS,
    CatalogueError,
    avg_from_oma_dbm,
    parse_catalogue,
)

oma = st.floats(min_value=-40.0, max_value=10.0, allow_nan=False)
er = st.floats(min_value=0.5, max_value=30.0, allow_nan=False)


@given(oma, er)
def test_average_is_at_least_half_the_oma(oma_dbm, er_db):
    # P_avg = (P1 + P0)/2 >= (P1 - P0)/2 = OMA/2 for any P0 >= 0 (definitions of OMA and
    # extinction ratio, IEEE 802.3 52.9; subclause from memory)
    assert avg_from_oma_dbm(oma_dbm, er_db) >= oma_dbm - 10 * math.log10(2) - 1e-9


@given(oma, er, st.floats(min_value=0.01, max_value=5.0))
def test_average_falls_as_the_extinction_ratio_rises(oma_dbm, er_db, step):
    # the same OMA at a higher extinction ratio needs less average power
    assert avg_from_oma_dbm(oma_dbm, er_db + step) < avg_from_oma_dbm(oma_dbm, er_db)


@given(oma, st.floats(min_value=0.01, max_value=10.0), er)
def test_average_rises_db_for_db_with_the_oma(oma_dbm, step, er_db):
    # the conversion is a fixed factor, so it shifts dB for dB
    assert math.isclose(avg_from_oma_dbm(oma_dbm + step, er_db),
                        avg_from_oma_dbm(oma_dbm, er_db) + step, abs_tol=1e-9)


cell = st.one_of(
    st.sampled_from(["", "1", "-3.5", "0", "smf", "mmf", "OM3", "nan", "inf", "x", "1e400",
                     "-0", "16", "17", "52", "IEEE"]),
    st.text(alphabet="abc,\"\n -.0123456789", max_size=8),
)


@settings(max_examples=300, deadline=None)
@given(
    st.lists(st.sampled_from(COLUMNS), min_size=1, max_size=len(COLUMNS), unique=True),
    st.lists(st.lists(cell, min_size=0, max_size=len(COLUMNS) + 2), max_size=4),
)
def test_parser_returns_rows_or_a_named_error_on_any_input(header, rows):
    text = ",".join(header) + "\n" + "\n".join(",".join(r) for r in rows) + "\n"
    try:
        specs = parse_catalogue(text, origin="site.csv")
    except CatalogueError as err:
        assert str(err).startswith("site.csv")
    else:
        for spec in specs:
            assert spec.name and spec.source
            assert (spec.rx_overload_dbm is None) == (spec.rx_min_avg_dbm is None)
