"""The invented town's sales: IDs stay unique at any size, the default demo never moves."""

from plumbrule.demo.town import demo_sales


def test_ids_unique_when_scaled_past_the_unusual_sales():
    # 7,000 ordinary sales number Q-2400 … past Q-9000; the unusual sales are Q-9001 … Q-9003
    # (a behaviour the benchmarks rely on: sales by ID need unique IDs)
    ids = demo_sales(7_000)["Sale ID"]
    assert ids.is_unique
    assert ids.iloc[6600:6602].tolist() == ["Q-9000", "Q-9004"]
    assert ids.iloc[-3:].tolist() == ["Q-9001", "Q-9002", "Q-9003"]


def test_default_demo_ids_and_prices_unchanged():
    # pinned from the demo's output before IDs stepped over Q-9001 … Q-9003 (docs quote it)
    d = demo_sales()
    assert d["Sale price"].iloc[0] == 127_500 and d["Sale price"].sum() == 58_030_500
    assert len(d) == 363
    assert d["Sale ID"].iloc[0] == "Q-2400" and d["Sale ID"].iloc[359] == "Q-2759"
    assert d["Sale ID"].iloc[-3:].tolist() == ["Q-9001", "Q-9002", "Q-9003"]
    assert demo_sales(6_601)["Sale ID"].iloc[-4] == "Q-9000"
