"""Set-aside sentences a person would write.

Source: statsmodels' macrodata (US quarterly macro series shipped with statsmodels): the yearly
mean of cpi takes one value per year, which pandas ``groupby(...).nunique()`` confirms; the
combination OLS reports is checked against statsmodels OLS of that column on the year indicators.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from regbench.data import Roles, build_design, table_from_frame
from regbench.formatting import plain_number
from regbench.models.ols import fit_ols


def test_numbers_are_written_as_people_write_them():
    assert plain_number(30.0) == "30" and plain_number(10.0) == "10" and plain_number(-0.5) == "-0.5"
    assert plain_number(1e8) == "100,000,000" and plain_number(273.15000000000043) == "273.15"
    assert plain_number(12345.6) == "12,346"


def test_column_constant_within_a_category_is_explained_in_those_words():
    import statsmodels.api as sm

    data = sm.datasets.macrodata.load_pandas().data
    frame = data[data["year"] < 1975][["year", "realgdp", "unemp", "cpi"]].copy()
    frame["cpi_year"] = frame.groupby("year")["cpi"].transform("mean")  # one value per year
    assert frame.groupby("year")["cpi_year"].nunique().max() == 1  # pandas: constant within each year
    frame["year"] = frame["year"].astype(int).astype(str)
    d = build_design(table_from_frame(frame), Roles(target="realgdp", predictors=("year", "unemp", "cpi_year"),
                                                     categorical=("year",)))
    r = fit_ols(d)
    (sa,) = r.set_aside
    assert sa.column == "cpi_year" and sa.reason == "category" and sa.category == "year"
    text = sa.sentence()
    assert text.startswith("cpi_year takes one value per year, so the year categories reproduce it")
    assert "e+" not in text and "×" not in text
    # The combination is the per-year value relative to the first year (statsmodels OLS).
    X = sm.add_constant(d.X[:, [d.index(c) for c in sa.combination]])
    ref = sm.OLS(d.X[:, d.index("cpi_year")], X).fit()
    np.testing.assert_allclose(list(sa.combination.values()), ref.params[1:], rtol=1e-9, atol=1e-9)


def test_combination_sentences_have_no_exponent_notation():
    rng = np.random.default_rng(1)
    a = rng.normal(size=60)
    frame = pd.DataFrame({"a": a, "b": 30.0 * a + 10.0, "y": a + rng.normal(size=60)})
    r = fit_ols(build_design(table_from_frame(frame), Roles(target="y")))
    text = r.set_aside[0].sentence()
    assert "10 + 30 × a" in text and not re.search(r"\de[+-]?\d", text)
