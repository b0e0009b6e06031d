"""Settings: one set of names for the CLI, worksheet functions and the Settings sheet;
raw values (CLI text, cell values, Python objects) become typed values or a one-line
SettingError naming the setting.

Source for the behaviour: the CLI options and the settings contract in the
brief (REGISTRY names, dashes on the CLI, underscores on sheets). Spreadsheet fact
(from memory): serial 45292 is 2024-01-01 in the 1900 date system.
"""

import datetime as dt
import math

import pytest

from plumbrule.cli.main import build_parser
from plumbrule.errors import SettingError
from plumbrule.settings import REGISTRY, Settings, normalise_name, parse_settings


def test_every_registry_name_is_a_settings_field_with_the_same_default():
    fields = Settings.__dataclass_fields__
    for name, s in REGISTRY.items():
        assert name in fields, name
        assert getattr(Settings(), name) == s.default, name


def test_blank_values_mean_the_default():
    got = parse_settings(confidence="", robust_se=None, folds=float("nan"), predictors="  ")
    assert got == Settings()


@pytest.mark.parametrize("raw, name", [("Log response", "log_response"),
                                       ("log-response", "log_response"),
                                       (" LOG_RESPONSE ", "log_response")])
def test_names_normalise_from_sheet_cli_and_code_spellings(raw, name):
    assert normalise_name(raw) == name
    assert parse_settings({raw: "yes"}).log_response is True


@pytest.mark.parametrize("value, expected", [
    (True, True), ("TRUE", True), ("yes", True), ("x", True), (1, True), (1.0, True),
    (False, False), ("no", False), ("off", False), (0, False),
])
def test_booleans_from_cells_and_text(value, expected):
    assert parse_settings(log_response=value).log_response is expected


@pytest.mark.parametrize("value, expected", [("0.9", 0.9), (0.99, 0.99), ("95%", 0.95),
                                             (" 0.8 ", 0.8)])
def test_confidence_accepts_numbers_and_percent(value, expected):
    assert parse_settings(confidence=value).confidence == pytest.approx(expected, rel=1e-15)


def test_columns_and_pairs_and_rows():
    s = parse_settings(predictors="Living area, Age ,,Lot size", categorical=["Hood", "Cond"],
                       reference_levels="Hood=Old Town, Cond = Good",
                       exclude_rows="12, 40=family sale", comps=[12, 40.0])
    assert s.predictors == ("Living area", "Age", "Lot size")
    assert s.categorical == ("Hood", "Cond")
    assert s.reference_levels == (("Hood", "Old Town"), ("Cond", "Good"))
    assert s.exclude_rows == ((12, ""), (40, "family sale"))
    assert s.comps == ((12, ""), (40, ""))


@pytest.mark.parametrize("value, expected", [
    ("2024-01-01", dt.date(2024, 1, 1)), (dt.datetime(2024, 1, 1, 9), dt.date(2024, 1, 1)),
    (45292, dt.date(2024, 1, 1)), (dt.date(2025, 6, 30), dt.date(2025, 6, 30)),
])
def test_dates_from_text_cells_and_serials(value, expected):
    assert parse_settings(valuation_date=value).valuation_date == expected


@pytest.mark.parametrize("kw, message", [
    (dict(resposne="Price"), r"^Setting 'resposne' is not one plumbrule knows\. Did you mean "
                             r"'response'\?$"),
    (dict(confidence="high"), r"^Setting 'confidence': 'high' is not a number\."),
    (dict(confidence="1.5"), r"^Setting 'confidence': 1\.5 is outside 0\.5\.\.0\.999\."),
    (dict(confidence="nan"), r"^Setting 'confidence': 'nan' is not a number\."),
    (dict(confidence=True), r"^Setting 'confidence': 'True' is not a number\."),
    (dict(iqr_fence="inf"), r"^Setting 'iqr_fence': 'inf' is not a number\."),
    (dict(iqr_fence=-1), r"^Setting 'iqr_fence': -1 is outside 0\.0\.\.\."),
    (dict(folds="2.5"), r"^Setting 'folds': '2\.5' is not a whole number\."),
    (dict(robust_se="HC9"), r"^Setting 'robust_se': 'HC9' is not one of HC1, HC3\.$"),
    (dict(log_response="maybe"), r"^Setting 'log_response': 'maybe' is not TRUE or FALSE\."),
    (dict(trim_percentiles="1,2,3"), r"^Setting 'trim_percentiles': '1,2,3' is not two "),
    (dict(trim_percentiles="99,1"), r"^Setting 'trim_percentiles': need 0 <= LOW < HIGH <= 100"),
    (dict(exclude_rows="12,x"), r"^Setting 'exclude_rows': 'x' is not a sheet row number\."),
    (dict(exclude_rows="0"), r"^Setting 'exclude_rows': '0' is not a sheet row number\."),
    (dict(exclude_rows="inf"), r"^Setting 'exclude_rows': 'inf' is not a sheet row number\."),
    (dict(reference_levels="Hood"), r"^Setting 'reference_levels': 'Hood' is not Column=Level\."),
    (dict(valuation_date="2024-13-01"), r"^Setting 'valuation_date': '2024-13-01' is not a "
                                        r"date\. Enter YYYY-MM-DD\.$"),
    (dict(valuation_date=1e12), r"^Setting 'valuation_date': 1000000000000\.0 is not a date"),
])
def test_bad_values_name_the_setting(kw, message):
    with pytest.raises(SettingError, match=message) as err:
        parse_settings(**kw)
    assert err.value.setting == next(iter(kw))
    assert "\n" not in str(err.value)


def test_choices_are_case_insensitive():
    assert parse_settings(robust_se="hc3").robust_se == "HC3"
    assert parse_settings(retransform="Median").retransform == "median"


def test_to_dict_is_plain_and_dates_are_iso():
    d = parse_settings(valuation_date="2024-01-01", confidence=0.9).to_dict()
    assert d["valuation_date"] == "2024-01-01" and d["confidence"] == 0.9
    assert "extra" not in d and set(d) == set(REGISTRY)


def test_cli_fit_has_one_option_per_model_setting_with_dashes():
    # Issue 2 §6 names these options; they are generated from the registry.
    parser = build_parser()
    fit = parser._subparsers._group_actions[0].choices["fit"]
    flags = {o for a in fit._actions for o in a.option_strings}
    for opt in ["--response", "--predictors", "--categorical", "--log-response",
                "--log-predictors", "--date-column", "--no-intercept", "--robust-se",
                "--confidence", "--sheet", "--json"]:
        assert opt in flags, opt
    for name, s in REGISTRY.items():
        if s.group == "model":
            assert "--" + name.replace("_", "-") in flags


def test_settings_are_frozen():
    s = parse_settings(confidence=0.9)
    with pytest.raises(AttributeError):
        s.confidence = 0.5
    assert s.replace(confidence=0.8).confidence == 0.8 and math.isclose(s.confidence, 0.9)


# --- the one settings-block parser (worksheet range and Settings sheet alike) -------------

def test_settings_block_skips_the_header_and_blank_lines_and_keeps_extra_columns():
    from plumbrule.settings import settings_from_rows
    rows = [["Setting", "Value", "Default", "What it does"],
            ["Log response", True, False, "text"],
            [None, None, None, None],
            ["folds", 5, 5, "text"]]
    assert settings_from_rows(rows, where="Settings sheet") == {"log_response": True, "folds": 5}


@pytest.mark.parametrize("rows,match", [
    ([["folds", 5], ["Folds", 3]], r"Setting 'Folds' appears twice in the settings sheet"),
    ([["folds", "#N/A"]], r"Setting 'folds': the cell holds the error value #N/A"),
    ([["folds", -2146826246]], r"error value #N/A"),          # the COM code Excel passes
    ([[None, 7]], r"Settings sheet, line 1: the value '7' has no setting name"),
])
def test_settings_block_errors_name_the_line_and_the_fix(rows, match):
    from plumbrule.settings import settings_from_rows
    with pytest.raises(SettingError, match=match):
        settings_from_rows(rows, where="Settings sheet")
