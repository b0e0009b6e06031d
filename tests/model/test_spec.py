"""Model spec and design: columns and roles, indicators with a named reference level,
logs, the market-conditions trend, the intercept, and re-applying the encoding to new rows.

Sources: the spec contract (which columns play which role, matched to the
headers); the encoded design is checked against an
independent construction with pandas.get_dummies / numpy and fitted with statsmodels OLS
(reference library). The month length is the mean Gregorian month, 365.2425 / 12 =
30.436875 days (the Gregorian calendar's 400-year cycle has 146097 days).
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from plumbrule.analysis import analyze
from plumbrule.model.design import DAYS_PER_MONTH, make_encoding, months_since
from plumbrule.errors import IntakeError, SpecError
from plumbrule.settings import parse_settings
from plumbrule.model.spec import build_spec, match_column

COLUMNS = ["Sale price", "Living area", "Lot size", "Age", "Condition", "Neighbourhood",
           "Sale date"]


def spec_of(**kw):
    return build_spec(parse_settings(**kw), COLUMNS)


# --- build_spec ----------------------------------------------------------------------

def test_names_match_headers_case_insensitively():
    s = spec_of(response="sale PRICE", predictors="living area, AGE")
    assert s.response == "Sale price" and s.predictors == ("Living area", "Age")


def test_intercept_on_by_default_and_off_on_request():
    assert spec_of(response="Sale price", predictors="Age").intercept is True
    assert spec_of(response="Sale price", predictors="Age", no_intercept=True).intercept is False


@pytest.mark.parametrize("kw, message", [
    (dict(predictors="Age"), r"^Setting 'response' is empty\. Name the sale-price column\.$"),
    (dict(response="Sale price"), r"^Setting 'predictors' is empty"),
    (dict(response="Price", predictors="Age"),
     r"^Setting 'response': there is no column 'Price'\. Did you mean 'Sale price'\?$"),
    (dict(response="Sale price", predictors="Age,Bedrooms"),
     r"^Setting 'predictors': there is no column 'Bedrooms'\. Columns are: 'Sale price', "),
    (dict(response="Sale price", predictors="Age,Sale price"),
     r"^Setting 'predictors': 'Sale price' is the response"),
    (dict(response="Sale price", predictors="Age", categorical="Condition"),
     r"^Setting 'categorical': 'Condition' is not among the predictors"),
    (dict(response="Sale price", predictors="Age,Condition", categorical="Condition",
          log_predictors="Condition"),
     r"^Setting 'log_predictors': 'Condition' is categorical"),
    (dict(response="Sale price", predictors="Age,Condition", reference_levels="Condition=Good"),
     r"^Setting 'reference_levels': 'Condition' is not a categorical predictor"),
    (dict(response="Sale price", predictors="Age", date_column="Sale price"),
     r"^Setting 'date_column': 'Sale price' is the response"),
    (dict(response="Sale price", predictors="Age", date_column="Sold on"),
     r"^Setting 'date_column': there is no column 'Sold on'"),
])
def test_spec_errors_name_the_setting_and_column(kw, message):
    with pytest.raises(SpecError, match=message):
        spec_of(**kw)


def test_the_date_column_is_a_trend_not_a_second_predictor():
    s = spec_of(response="Sale price", predictors="Age,Sale date", date_column="Sale date")
    assert s.predictors == ("Age",) and s.date_column == "Sale date"
    assert s.used_columns == ("Sale price", "Age", "Sale date")


def test_match_column_suggests_the_close_header():
    with pytest.raises(SpecError, match=r"Did you mean 'Lot size'\?") as err:
        match_column("Lot sise", COLUMNS, "predictors")
    assert (err.value.setting, err.value.column) == ("predictors", "Lot sise")


# --- encoding ------------------------------------------------------------------------------

@pytest.fixture
def sales():
    rng = np.random.default_rng(3)
    n = 60
    hood = np.array(["Millbank"] * 25 + ["Old Quay"] * 20 + ["Fenby Park"] * 15)
    rng.shuffle(hood)
    cond = np.array(["Average"] * 20 + ["Good"] * 22 + ["Fair"] * 18)
    rng.shuffle(cond)
    area = rng.uniform(900, 2600, n).round()
    lot = rng.uniform(3000, 12000, n).round()
    age = rng.integers(0, 80, n).astype(float)
    days = rng.integers(0, 700, n)
    date = pd.Timestamp("2024-02-10") + pd.to_timedelta(days, unit="D")
    effect = pd.Series(hood).map({"Millbank": 0, "Old Quay": 0.1, "Fenby Park": -0.05}).to_numpy()
    price = np.exp(11 + 0.6 * np.log(area / 1500) + 0.1 * np.log(lot / 7000) - 0.004 * age
                   + effect + 0.003 * days / DAYS_PER_MONTH + rng.normal(0, 0.05, n))
    return pd.DataFrame({"Sale price": price.round(-2), "Living area": area, "Lot size": lot,
                         "Age": age, "Condition": cond, "Neighbourhood": hood, "Sale date": date})


FULL = dict(response="Sale price", predictors="Living area,Lot size,Age,Condition,Neighbourhood",
            categorical="Condition,Neighbourhood", log_response=True,
            log_predictors="Living area,Lot size", date_column="Sale date", folds=0)


def test_design_matches_an_independent_construction_fitted_by_statsmodels(sales):
    res = analyze(sales, FULL)
    # Independent design: pandas indicators without the reference (the most frequent level:
    # Good for Condition, 22 of 60; Millbank for Neighbourhood, 25 of 60), logs, and months.
    months = (sales["Sale date"] - sales["Sale date"].min()).dt.days / 30.436875
    x = pd.concat([np.log(sales[["Living area", "Lot size"]]), sales[["Age"]],
                   pd.get_dummies(sales["Condition"], dtype=float).drop(columns="Good"),
                   pd.get_dummies(sales["Neighbourhood"], dtype=float).drop(columns="Millbank"),
                   months.rename("months")], axis=1)
    ref = sm.OLS(np.log(sales["Sale price"]), sm.add_constant(x)).fit()
    coefs = res.tables.coefficients
    assert coefs["term"].tolist() == [
        "intercept", "log(Living area)", "log(Lot size)", "Age", "Condition: Average",
        "Condition: Fair", "Neighbourhood: Fenby Park", "Neighbourhood: Old Quay",
        "Sale date (months)"]
    np.testing.assert_allclose(coefs["estimate"], ref.params.to_numpy(), rtol=1e-9)
    np.testing.assert_allclose(coefs["std_error"], ref.bse.to_numpy(), rtol=1e-9)


def test_reference_level_is_most_frequent_unless_named(sales):
    enc = analyze(sales, FULL).encoding
    assert enc.reference("Condition") == "Good" and enc.reference("Neighbourhood") == "Millbank"
    enc = analyze(sales, dict(FULL, reference_levels="condition=average")).encoding
    assert enc.levels[0] == ("Condition", ("Average", "Fair", "Good"))


def test_reference_ties_break_alphabetically():
    frame = pd.DataFrame({"y": [1.0, 2, 3, 4, 5, 7], "h": ["b", "a", "b", "a", "c", "c"]})
    spec = build_spec(parse_settings(response="y", predictors="h", categorical="h"), ["y", "h"])
    assert make_encoding(spec, frame).levels == (("h", ("a", "b", "c")),)


def test_unknown_reference_level_is_named(sales):
    with pytest.raises(
        SpecError,
        match=r"^Setting 'reference_levels': 'Condition' has no level "
        r"'Excellent'\. Levels are: 'Average', 'Fair' and 'Good'\.$",
    ):
        analyze(sales, dict(FULL, reference_levels="Condition=Excellent"))


def test_a_category_with_one_level_is_an_error(sales):
    with pytest.raises(SpecError, match=r"'Condition' has only one level \('Good'\)"):
        analyze(sales.assign(Condition="Good"), FULL)


def test_log_of_a_non_positive_predictor_names_the_row(sales):
    bad = sales.copy()
    bad.loc[7, "Lot size"] = 0            # frame row 7 is sheet row 9
    with pytest.raises(SpecError, match=r"^Column 'Lot size', row 9: the logarithm needs a "
                                        r"positive value, found 0\. Correct the cell or take "
                                        r"'Lot size' out of 'log_predictors'\.$") as err:
        analyze(bad, FULL)
    assert err.value.row == 9


def test_log_of_a_non_positive_response_names_the_row(sales):
    bad = sales.copy()
    bad.loc[3, "Sale price"] = -5
    with pytest.raises(SpecError, match=r"^Column 'Sale price', row 5: the logarithm needs a "
                                        r"positive value, found -5\. Correct the cell or turn "
                                        r"off 'log_response'\.$"):
        analyze(bad, FULL)


def test_months_since_uses_the_mean_gregorian_month():
    got = months_since(pd.Series(pd.to_datetime(["2024-01-01", "2024-07-01", None])),
                       pd.Timestamp("2024-01-01"))
    assert got[0] == 0.0
    assert got[1] == pytest.approx(182 / 30.436875, rel=1e-15)
    assert np.isnan(got[2])


def test_trend_counts_from_the_earliest_sale(sales):
    enc = analyze(sales, FULL).encoding
    assert enc.date_origin == sales["Sale date"].min()


def test_no_intercept_matches_statsmodels_without_a_constant(sales):
    res = analyze(sales, response="Sale price", predictors="Living area,Age", no_intercept=True,
                  folds=0)
    ref = sm.OLS(sales["Sale price"], sales[["Living area", "Age"]]).fit()
    coefs = res.tables.coefficients
    assert "intercept" not in coefs["term"].tolist()
    np.testing.assert_allclose(coefs["estimate"], ref.params.to_numpy(), rtol=1e-9)


# --- the same encoding on new rows -----------------------------------------------------

def test_encoding_reapplied_to_the_fitting_rows_gives_the_same_design(sales):
    res = analyze(sales, FULL)
    rows = res.encoding.new_rows(sales.drop(columns="Sale price"), label="subject row")
    np.testing.assert_array_equal(res.encoding.design(rows, "subject row"), res.model.x)


def test_new_rows_are_typed_like_the_sales(sales):
    enc = analyze(sales, FULL).encoding
    subject = [["Living area", "Lot size", "Age", "Condition", "Neighbourhood", "Sale date"],
               ["1,800", "$7,000", 10, "Fair", " Old Quay ", "2025-01-10"]]
    x = enc.design(enc.new_rows(subject), "subject row")
    months = (pd.Timestamp("2025-01-10") - sales["Sale date"].min()).days / 30.436875
    np.testing.assert_allclose(x[0], [np.log(1800), np.log(7000), 10, 0, 1, 0, 1, months],
                               rtol=1e-13)


def test_unseen_level_in_a_subject_names_row_and_column(sales):
    enc = analyze(sales, FULL).encoding
    subject = sales.drop(columns="Sale price").head(3).assign(Neighbourhood="Hilltop")
    with pytest.raises(SpecError, match=r"^Subject row 2, column 'Neighbourhood': level 'Hilltop' "
                                        r"does not occur in the sales used, so the model has no "
                                        r"effect for it\. Use one of 'Millbank', 'Fenby Park' and "
                                        r"'Old Quay'\.$") as err:
        enc.design(enc.new_rows(subject), label="subject row")
    assert (err.value.row, err.value.column) == (2, "Neighbourhood")


def test_a_level_differing_only_in_case_is_the_sales_level(sales):
    enc = analyze(sales, FULL).encoding
    subject = sales.drop(columns="Sale price").head(1)
    x = enc.design(enc.new_rows(subject.assign(Neighbourhood=" old  QUAY")), "subject row")
    want = enc.design(enc.new_rows(subject.assign(Neighbourhood="Old Quay")), "subject row")
    np.testing.assert_array_equal(x, want)


def test_unseen_level_one_letter_off_suggests_the_level(sales):
    enc = analyze(sales, FULL).encoding
    subject = sales.drop(columns="Sale price").head(1).assign(Neighbourhood="Old Qauy")
    with pytest.raises(SpecError, match=r"Did you mean 'Old Quay'\?"):
        enc.new_rows(subject, label="comparable row")


def test_new_rows_missing_a_column_or_a_value(sales):
    enc = analyze(sales, FULL).encoding
    subject = sales.drop(columns=["Sale price", "Age"]).head(1)
    with pytest.raises(SpecError, match=r"^The subject rows have no column 'Age'; the model needs"):
        enc.new_rows(subject)
    subject = sales.drop(columns="Sale price").head(2)
    subject.loc[1, "Living area"] = None
    with pytest.raises(IntakeError,
                       match=r"^Subject row 3, column 'Living area': the cell is blank"):
        enc.new_rows(subject)


def test_new_rows_take_the_valuation_date_for_a_blank_or_absent_date(sales):
    enc = analyze(sales, FULL).encoding
    subject = sales.drop(columns="Sale price").head(2)
    subject["Sale date"] = [pd.NaT, pd.Timestamp("2024-03-01")]
    with pytest.raises(IntakeError, match=r"column 'Sale date': the cell is blank\. Fill it in, or "
                                        r"give the valuation date\."):
        enc.new_rows(subject)
    rows = enc.new_rows(subject, date=pd.Timestamp("2025-06-30"))
    assert rows["Sale date"].tolist() == [pd.Timestamp("2025-06-30"), pd.Timestamp("2024-03-01")]
    rows = enc.new_rows(subject.drop(columns="Sale date"), date=pd.Timestamp("2025-06-30"))
    assert (rows["Sale date"] == pd.Timestamp("2025-06-30")).all()


def test_design_refuses_blank_values_in_new_rows(sales):
    enc = analyze(sales, FULL).encoding
    rows = enc.new_rows(sales.drop(columns="Sale price").head(2))
    rows.loc[3, "Sale date"] = pd.NaT
    with pytest.raises(SpecError, match=r"^Subject row 3, column 'Sale date': the value is blank"):
        enc.design(rows, "subject row")
