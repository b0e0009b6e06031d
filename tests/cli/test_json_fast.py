"""The fast ``--json`` writer (cells' text found column by column, rows laid out in a byte
matrix) writes exactly what the careful writer writes: every cell through ``jsonable`` into a
dict per row, then orjson (``reference_json``). Checked byte for byte, which also fixes the key
order, on generated tables of every column kind the engine's tables hold, on edge shapes, on
the demo town's analysis and through ``plumbrule fit --json``."""

import json
import types

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from plumbrule.render import json as rj


def _result(tables: dict) -> types.SimpleNamespace:
    """A stand-in for an Analysis: only ``tables.items()`` is read by the writers."""
    return types.SimpleNamespace(tables=types.SimpleNamespace(items=lambda: tables.items()))


def _same(tables: dict, extra=None) -> str:
    fast = rj.analysis_json_bytes(_result(tables), extra)
    careful = rj.reference_json(_result(tables), extra).encode("utf-8")
    assert fast == careful
    # and it is one JSON object, key order that of the tables
    pairs = json.loads(fast, object_pairs_hook=lambda kv: kv)
    assert [k for k, _ in pairs][:len(tables)] == [str(k) for k in tables]
    return fast.decode("utf-8")


@pytest.fixture(params=[(rj.BLOCK_ROWS, rj.MATRIX_BYTES), (3, 64)], ids=["blocks", "tiny"])
def small_blocks(request, monkeypatch):
    """Run once as shipped and once with blocks of three rows and a 64-byte matrix, so row
    blocks and matrix pieces meet inside every table."""
    block, matrix = request.param
    monkeypatch.setattr(rj, "BLOCK_ROWS", block)
    monkeypatch.setattr(rj, "MATRIX_BYTES", matrix)


TRICKY_TEXT = ['plain', 'say "hi"', 'back\\slash', 'a,b', ',', '"', '\\', '\\"', '",', 'tab\tnl\n',
               '\x00nul', '\x1f', '\x7f', 'élan', '\u202e', '\u2028', '日本', '😀', '', ' ', 'null',
               '{"a":1}', '[1,2]', '%s %%']


def every_kind(n: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    floats = rng.normal(size=n) * 10.0 ** rng.integers(-300, 300, n)
    floats[rng.random(n) < 0.2] = np.nan
    floats[rng.random(n) < 0.05] = np.inf
    floats[rng.random(n) < 0.05] = -np.inf
    floats[rng.random(n) < 0.05] = -0.0
    when = pd.Series(pd.to_datetime("2024-01-01") + pd.to_timedelta(rng.integers(0, 10**9, n),
                                                                      unit="s"))
    when[rng.random(n) < 0.2] = pd.NaT
    frac = when + pd.to_timedelta(rng.integers(0, 10**6, n), unit="us")
    text = np.array(TRICKY_TEXT, dtype=object)[rng.integers(0, len(TRICKY_TEXT), n)]
    text[rng.random(n) < 0.2] = None
    mixed = np.array([1, 2.5, "a,b", None, np.nan, True, np.int64(7), np.float64(np.inf),
                      pd.Timestamp("2025-03-14 10:30"), "x"], dtype=object)
    return pd.DataFrame({
        "row": rng.integers(-2**62, 2**62, n),
        "small": rng.integers(0, 100, n).astype(np.int16),
        "swapped": rng.integers(-1000, 1000, n).astype(">i8"),      # as a file may bring it
        "big": rng.integers(0, 2**63, n, dtype=np.uint64) * np.uint64(2),
        "value": floats,
        "f32": rng.normal(size=n).astype(np.float32),
        "ok": rng.random(n) < 0.5,
        "when": when,
        "when_us": frac,
        "text": text,
        "ids": pd.array([str(100000 + i) if i % 7 else None for i in range(n)], dtype="str"),
        "cat": pd.Categorical(rng.choice(["Old Quay", "Millbank"], n)),
        "mixed": mixed[rng.integers(0, len(mixed), n)],
        "nullable": pd.array([i if i % 3 else None for i in range(n)], dtype="Int64"),
        "all_missing": [None] * n,
        'quote"key,\\': rng.normal(size=n),
        "é": rng.normal(size=n),
    })


@pytest.mark.parametrize("n", [0, 1, 2, 7, 50])
def test_every_column_kind_byte_for_byte(n, small_blocks):
    frame = every_kind(n, seed=n)
    out = json.loads(_same({"residuals": frame, "fit": frame, "copy": frame.copy()}))
    assert out["residuals"] == json.loads(rj.dumps(rj.frame_records(frame)))
    assert len(out["residuals"]) == n
    assert out["fit"] == (out["residuals"][0] if n else [])
    if n:
        rec = out["residuals"][0]
        assert list(rec) == [str(c) for c in frame.columns]


def test_missing_values_and_dates_as_a_reader_expects(small_blocks):
    # The CLI contract: NaN, ±inf and NaT are null; dates ISO text, a fraction of a second
    # written as datetime.isoformat writes it (Python's documented format).
    frame = pd.DataFrame({
        "x": [1.0 / 3.0, np.nan, np.inf, -np.inf, 5e-324],
        "when": pd.to_datetime(["2025-03-14", None, "2024-01-02 10:30", "1969-12-31 23:59:59.5",
                                "2025-01-01 00:00:00.000001"], format="ISO8601"),
        "name": ["a", None, np.nan, "b", pd.NA],
        "n": np.arange(5),
    })
    got = json.loads(_same({"t": frame}))["t"]
    assert [r["x"] for r in got] == [1.0 / 3.0, None, None, None, 5e-324]
    assert [r["when"] for r in got] == ["2025-03-14T00:00:00", None, "2024-01-02T10:30:00",
                                        "1969-12-31T23:59:59.500000",
                                        "2025-01-01T00:00:00.000001"]
    assert [r["name"] for r in got] == ["a", None, None, "b", None]


def test_edge_shapes(small_blocks):
    empty_rows = pd.DataFrame({"a": pd.Series([], dtype=float), "b": pd.Series([], dtype=str)})
    no_columns = pd.DataFrame(index=range(3))
    repeated = pd.DataFrame([[1, "x", 2.5]], columns=["a", "b", "a"])
    numbered = pd.DataFrame({0: [1.5, 2.5], 1: ["p", "q"]})
    out = json.loads(_same({"fit": empty_rows, "empty": empty_rows, "none": pd.DataFrame(),
                            "no_columns": no_columns, "repeated": repeated,
                            "numbered": numbered, "fit_cols": no_columns}))
    assert out["fit"] == [] and out["empty"] == [] and out["no_columns"] == []
    assert out["repeated"] == [{"a": 2.5, "b": "x"}]        # as dict(zip(...)) keeps it
    assert out["numbered"][1] == {"0": 2.5, "1": "q"}


def test_extra_keys_after_the_tables_or_in_a_table_s_place():
    table = pd.DataFrame({"a": [1, 2]})
    extra = {"note": "hello", "fit": {"replaced": np.float64(np.nan)}, "n": np.int64(3)}
    out = json.loads(_same({"fit": table, "t": table}, extra))
    assert list(out) == ["fit", "t", "note", "n"]
    assert out["fit"] == {"replaced": None} and out["n"] == 3
    assert rj.analysis_json_bytes(_result({})) == b"{}"


@pytest.mark.parametrize("matrix", [1 << 24, 64], ids=["wide matrix", "cell by cell"])
def test_a_long_text_cell_among_short_ones(matrix, monkeypatch):
    # one wide cell makes the byte matrix wide: fewer rows at a time, or (when the slots
    # would be mostly padding) the rows joined cell by cell; the same text either way
    monkeypatch.setattr(rj, "MATRIX_BYTES", matrix)
    text = ["short"] * 40
    text[17] = "long, \"quoted\" " * 500
    frame = pd.DataFrame({"text": text, "x": np.arange(40.0)})
    for block in (40, 7):
        fast = b'{"t":' + b"".join(rj.table_chunks(frame, block=block)) + b"}"
        assert fast == rj.reference_json(_result({"t": frame})).encode("utf-8")


def test_column_text_pieces_are_each_cell_s_json():
    import orjson
    frame = every_kind(30, seed=5)
    for name in frame.columns:
        col = frame[name]
        want = [orjson.dumps(rj.jsonable(v), default=rj._fallback) for v in col.tolist()]
        assert rj.column_json(col).texts() == want, name
        assert rj.column_json(col.iloc[:0]).texts() == [], name


finite = st.floats(allow_nan=True, allow_infinity=True, width=64)
cells = st.one_of(st.none(), st.text(alphabet=st.characters(blacklist_categories=("Cs",)),
                                      max_size=12))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(floats=st.lists(finite, min_size=1, max_size=30), data=st.data())
def test_generated_tables(floats, data):
    n = len(floats)
    text = data.draw(st.lists(cells, min_size=n, max_size=n))
    ints = data.draw(st.lists(st.integers(-2**63, 2**63 - 1), min_size=n, max_size=n))
    micros = data.draw(st.lists(st.one_of(st.none(), st.integers(-2 * 10**15, 8 * 10**15)),
                                min_size=n, max_size=n))
    mixed = data.draw(st.lists(st.one_of(cells, finite, st.booleans(),
                                         st.integers(-2**53, 2**53)), min_size=n, max_size=n))
    when = pd.Series([pd.NaT if m is None else pd.Timestamp(m, unit="us") for m in micros],
                     dtype="datetime64[ns]")
    frame = pd.DataFrame({"x": floats, "text": pd.Series(text, dtype=object),
                          "i": np.array(ints, dtype=np.int64), "when": when,
                          "mixed": pd.Series(mixed, dtype=object)})
    block = data.draw(st.integers(1, n + 1))
    fast = b'{"t":' + b"".join(rj.table_chunks(frame, block=block)) + b"}"
    assert fast == rj.reference_json(_result({"t": frame})).encode("utf-8")
    # the plain records (frame_records, for callers that add to them) say the same
    assert rj.dumps_bytes({"t": rj.frame_records(frame)}) == fast


@pytest.fixture(scope="module")
def demo():
    from plumbrule.analysis import analyze
    from plumbrule.cli.demo import demo_settings
    from plumbrule.demo.town import demo_sales
    from plumbrule.settings import parse_settings
    settings = {k: v for k, v in demo_settings().items() if v is not None}
    return analyze(demo_sales(), parse_settings(settings))


def test_the_demo_analysis(demo):
    fast = rj.analysis_json(demo)
    assert fast == rj.reference_json(demo)
    out = json.loads(fast)
    assert list(out) == list(demo.tables.names())
    assert isinstance(out["fit"], dict) and len(out["residuals"]) == len(demo.tables.residuals)


def test_fit_json_on_stdout_is_the_analysis_json(tmp_path, capsysbinary):
    # `plumbrule fit --json` writes the bytes to the binary stream; a caller whose stdout
    # is text only (a StringIO) gets the same text
    import contextlib
    import io

    from plumbrule.analysis import analyze
    from plumbrule import cli
    from plumbrule.demo.town import demo_sales
    from plumbrule.settings import parse_settings
    sales = demo_sales(n=120, seed=3)
    path = tmp_path / "sales.csv"
    sales.to_csv(path, index=False)
    args = ["fit", str(path), "--response", "Sale price", "--predictors", "Living area,Age",
            "--date-column", "Sale date", "--folds", "3", "--json"]
    assert cli.main(args) == 0
    out = capsysbinary.readouterr().out
    text = io.StringIO()
    with contextlib.redirect_stdout(text):
        assert cli.main(args) == 0
    assert text.getvalue().encode("utf-8") == out
    assert out.endswith(b"}\n")
    want = analyze(pd.read_csv(path), parse_settings(
        {"response": "Sale price", "predictors": "Living area,Age", "date_column": "Sale date",
         "folds": 3}))
    printed = json.loads(out)
    assert list(printed) == list(want.tables.names())
    assert printed["fit"]["n_used"] == want.tables.fit["n_used"].iloc[0] == len(sales)
    assert printed["coefficients"] == json.loads(rj.analysis_json(want))["coefficients"]


@pytest.mark.parametrize("spread_days", [0, 40, 10**5])
def test_dates_close_together_and_far_apart(spread_days, small_blocks):
    # sale dates within a short span are written a day at a time, others date by date: the
    # same ISO text as datetime.isoformat (Python's documented format) either way, with
    # times of day, fractions of a second, NaT and days before 1970
    rng = np.random.default_rng(spread_days)
    n = 400
    start = pd.Timestamp("1969-12-20")
    micros = rng.integers(0, max(spread_days, 1) * 86_400 * 10**6, n)
    micros[rng.random(n) < 0.5] //= 86_400 * 10**6          # some at midnight
    micros[rng.random(n) < 0.5] //= 10**6
    when = pd.Series(start + pd.to_timedelta(micros, unit="us"))
    when[rng.random(n) < 0.1] = pd.NaT
    midnight = pd.Series(start + pd.to_timedelta(rng.integers(0, spread_days + 1, n), unit="D"))
    frame = pd.DataFrame({"when": when, "day": midnight, "x": rng.normal(size=n)})
    got = json.loads(_same({"t": frame}))["t"]
    assert [r["when"] for r in got] == [None if pd.isna(t) else t.to_pydatetime().isoformat()
                                        for t in when]
    assert [r["day"] for r in got] == [t.to_pydatetime().isoformat() for t in midnight]
