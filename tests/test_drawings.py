"""The tree and chart drawings: layout without overlaps, plan marks, pagination, safe SVG."""

from __future__ import annotations

import json
import random
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
from reportlab.graphics.shapes import Drawing, Line, String
from reportlab.lib.attrmap import DerivedValue

import valuation
from decisions.drawings import charts
from decisions.drawings.render import to_pdf_flowable, to_svg
from decisions.drawings.style import amount, fit_text, money, pdf_safe, text_width
from decisions.drawings.tree import tree_drawings, tree_legend, tree_parts

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"
SVG = "{http://www.w3.org/2000/svg}"


def load(name: str) -> dict:
    return json.loads((FIXTURES / name).read_text())


def big_tree(n_nodes: int = 500, *, seed: int = 500, depth: int = 7) -> dict:
    """An invented general tree of about ``n_nodes`` nodes (seeded), labels with markup."""
    rnd = random.Random(seed)
    nodes = {"n0": {"id": "n0", "kind": "decision", "name": "First choice", "branches": []}}
    order, frontier = ["n0"], [("n0", 0)]
    while frontier and len(nodes) < n_nodes:
        parent, level = frontier.pop(0)
        for i in range(rnd.randint(2, 3)):
            if len(nodes) >= n_nodes:
                break
            child = f"n{len(nodes)}"
            kind = "end" if level + 1 >= depth else rnd.choice(["chance", "chance", "decision"])
            if kind == "end":
                nodes[child] = {"id": child, "kind": "end", "payoff": rnd.randint(-500, 2000) * 1000}
            else:
                nodes[child] = {"id": child, "kind": kind, "name": f"Stage {child} <b>&amp;",
                                "branches": []}
                frontier.append((child, level + 1))
            branch = {"label": f"option {i} <i>&", "to": child}
            if nodes[parent]["kind"] == "decision":
                branch["cash_flow"] = -rnd.randint(0, 90) * 1000
            nodes[parent]["branches"].append(branch)
            order.append(child)
    for key, node in nodes.items():
        if node["kind"] != "end" and not node["branches"]:   # the budget ran out here
            nodes[key] = {"id": key, "kind": "end", "payoff": 0}
        elif node["kind"] == "chance":
            k = len(node["branches"])
            for j, br in enumerate(node["branches"]):
                br["probability"] = 1.0 / k if j < k - 1 else 1.0 - (k - 1) / k
    return {"kind": "tree", "title": "Generated staged plan (invented)", "currency": "EUR",
            "objective": "max", "root": "n0", "nodes": [nodes[k] for k in order]}


def overlapping(boxes) -> list:
    """Pairs of boxes with a common interior (a sweep over x)."""
    found = []
    boxes = sorted(boxes)
    for i, a in enumerate(boxes):
        for b in boxes[i + 1:]:
            if b[0] >= a[2]:
                break
            if a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]:
                found.append((a, b))
    return found


def strings(drawing: Drawing) -> list[str]:
    out = []
    stack = list(drawing.contents)
    while stack:
        shape = stack.pop()
        if isinstance(shape, String):
            out.append(shape.text)
        stack.extend(getattr(shape, "contents", []))
    return out


def parts_for(doc: dict, **kwargs):
    results = valuation.evaluate(doc)
    return results, tree_parts(valuation.expand(doc), results["nodes"], **kwargs)


MODELS = [
    pytest.param(lambda: load("heating_tree.json"), id="heating-tree"),
    pytest.param(lambda: load("heating_payoff_table.json"), id="heating-payoff-table"),
    pytest.param(lambda: big_tree(500), id="generated-500-nodes"),
    pytest.param(lambda: big_tree(200, seed=3, depth=4), id="generated-200-wide"),
]


@pytest.mark.parametrize("make", MODELS)
def test_tree_symbols_and_texts_never_overlap_and_stay_inside_the_drawing(make):
    doc = make()
    _, parts = parts_for(doc, width=511, height=660)
    assert parts
    for part in parts:
        d = part.drawing
        assert d.width <= 511 and d.height <= 660, part.caption
        assert overlapping(part.boxes) == [], f"part {part.number}"
        outside = [b for b in part.boxes
                   if b[0] < 0 or b[1] < 0 or b[2] > d.width or b[3] > d.height]
        assert outside == [], f"part {part.number}"


@pytest.mark.parametrize("make", MODELS)
def test_every_node_of_the_tree_is_drawn(make):
    tree = valuation.expand(make())
    _, parts = parts_for(make(), width=511, height=660)
    drawn = {b[4].removeprefix("node ") for p in parts for b in p.boxes if b[4].startswith("node ")}
    assert drawn == {n["id"] for n in tree["nodes"]}


def test_a_500_node_tree_is_split_into_parts_that_name_each_other():
    _, parts = parts_for(big_tree(500), width=511, height=660)
    assert len(parts) > 1
    numbers = [p.number for p in parts]
    assert numbers == list(range(1, len(parts) + 1))
    texts = [s for p in parts for s in strings(p.drawing)]
    for part in parts[1:]:
        assert part.from_part is not None and part.from_part < part.number
        assert f"from part {part.from_part}" in " ".join(strings(part.drawing))
        assert f"continued in part {part.number} »" in texts or \
            any(f"continue in part {part.number} »" in s for s in texts)
        assert f"Part {part.number} of {len(parts)}" in part.caption


def test_tree_marks_the_recommended_and_pruned_branches_and_shows_node_values():
    doc = load("heating_tree.json")
    results, parts = parts_for(doc, width=511, height=660)
    assert len(parts) == 1  # four levels fit one A4 frame
    whats = {b[4] for b in parts[0].boxes}
    pruned = results["nodes"]["heat-source"]["pruned"]   # ['Shallow ground loop', 'Stay on gas']
    assert pruned == ["Shallow ground loop", "Stay on gas"]
    assert {"prune mark conductivity", "prune mark gas-price", "prune mark hot-current"} <= whats
    assert "prune mark reservoir" not in whats
    texts = strings(parts[0].drawing)
    assert f"value {amount(results['expected_value'])}" in texts       # the root: 622,394
    assert "value 622,394" in texts
    assert "p 0.4" in texts and "cash -1,600,000" in texts
    assert any(s.startswith("11,000,000  (PV 6,142,343)") for s in texts)


def test_a_chance_node_with_more_branches_than_rows_spreads_over_parts():
    n = 70
    doc = {"kind": "tree", "title": "Wide (invented)", "root": "c", "nodes": [
        {"id": "c", "kind": "chance", "name": "Many outcomes",
         "branches": [{"label": f"outcome {i}", "probability": 1 / n, "to": f"e{i}"}
                      for i in range(n)]},
        *[{"id": f"e{i}", "kind": "end", "payoff": i * 1000} for i in range(n)]]}
    _, parts = parts_for(doc, width=511, height=400)
    assert len(parts) >= 4
    drawn = [b[4] for p in parts for b in p.boxes if b[4].startswith("node e")]
    assert sorted(drawn) == sorted(f"node e{i}" for i in range(n))   # each end exactly once
    assert any("continue in part 2 »" in s for s in strings(parts[0].drawing))
    for part in parts:
        assert overlapping(part.boxes) == []


def test_above_the_collapse_size_pruned_subtrees_become_one_stub_each():
    doc = big_tree(300, seed=11)
    results = valuation.evaluate(doc)
    parts = tree_parts(doc, results["nodes"], width=511, height=660, collapse_over=100)
    texts = [s for p in parts for s in strings(p.drawing)]
    assert any(re.fullmatch(r"pruned: [\d,]+ nodes below not drawn", s) for s in texts)
    assert "each subtree behind a pruned branch is drawn as one stub" in parts[0].caption
    full = tree_parts(doc, results["nodes"], width=511, height=660)
    assert len(parts) < len(full)


def test_part_limit_is_stated_on_the_markers():
    parts = tree_parts(big_tree(500), None, width=511, height=300, max_parts=3)
    assert len(parts) == 3
    texts = [s for p in parts for s in strings(p.drawing)]
    assert any("part limit reached" in s for s in texts)


def test_tree_drawings_returns_one_drawing_per_part():
    doc = load("heating_tree.json")
    drawings = tree_drawings(doc, valuation.evaluate(doc)["nodes"])
    assert all(isinstance(d, Drawing) for d in drawings)


# ---- SVG --------------------------------------------------------------------------------------

def test_svg_parses_and_escapes_markup_in_labels():
    doc = big_tree(40, seed=5)
    drawing = tree_drawings(doc, valuation.evaluate(doc)["nodes"], width=900)[0]
    svg = to_svg(drawing, title="Tree <1> & co")
    root = ET.fromstring(svg)  # noqa: S314 (our own renderer's output)
    assert root.tag == f"{SVG}svg"
    texts = [el.text for el in root.iter(f"{SVG}text")]
    assert any(tx and "<i>&" in tx for tx in texts)          # the label, read back intact
    assert "<i>" not in svg and "&lt;i&gt;&amp;" in svg       # ... and escaped in the markup
    assert root.find(f"{SVG}title").text == "Tree <1> & co"
    assert not svg.startswith("<?xml") and "DOCTYPE" not in svg


def test_two_svgs_on_one_page_do_not_share_element_ids():
    a = to_svg(charts.risk_profile_chart({"cumulative": [{"value": 1, "probability": 1.0}]}))
    b = to_svg(tree_legend())
    ids = lambda s: set(re.findall(r'id="([^"]+)"', s))  # noqa: E731
    assert ids(a) and ids(b) and not ids(a) & ids(b)
    for svg in (a, b):
        for ref in re.findall(r"url\(#([^)]+)\)", svg):
            assert ref in ids(svg)


def test_svg_is_the_same_text_for_the_same_drawing():
    make = lambda: charts.tornado_chart(  # noqa: E731
        [{"label": "P(hot)", "low": 0.3, "high": 0.5, "value_low": 1, "value_high": 3,
          "swing": 2}], base_value=2)
    assert to_svg(make()) == to_svg(make())


def test_svg_refuses_a_bad_id_prefix():
    with pytest.raises(ValueError, match="id_prefix: must be a letter"):
        to_svg(tree_legend(), id_prefix='x" onload="alert(1)')


# ---- charts -------------------------------------------------------------------------------------

def all_charts() -> list[Drawing]:
    r = valuation.evaluate(load("heating_payoff_table.json"))
    return [
        charts.risk_profile_chart(r["risk_profile"], currency="EUR"),
        charts.tornado_chart([{"name": "states[0].probability", "label": "P(hot reservoir)",
                               "low": 0.3, "high": 0.5, "value_low": 800000.0,
                               "value_high": 1300000.0, "swing": 500000.0}],
                             base_value=r["expected_value"], currency="EUR"),
        charts.sensitivity_chart({"label": "P(hot reservoir)", "x": [0, 0.5, 1],
                                  "value": [700000, 1000000, 3000000], "base": 0.4,
                                  "break_even": [{"value": 0.2375, "from": "a", "to": "b"}]}),
        charts.accuracy_chart([{"label": "hot -> favourable", "claimed": 0.85,
                                "calibrated": 0.8, "low": 0.6, "high": 0.93}]),
        charts.outcomes_chart([{"label": "Year 1 heat sales", "expected": 100.0,
                                "realised": 80.0}], currency="EUR"),
        charts.calibration_chart([{"lower": 0.0, "upper": 0.5, "count": 3, "mean_forecast": 0.3,
                                   "observed_frequency": 0.33}, {"lower": 0.5, "upper": 1.0,
                                   "count": 0, "mean_forecast": None,
                                   "observed_frequency": None}]),
    ]


def test_every_chart_is_a_drawing_that_renders_to_svg():
    for drawing in all_charts():
        assert isinstance(drawing, Drawing)
        ET.fromstring(to_svg(drawing))  # noqa: S314 (our own renderer's output)
        flowable = to_pdf_flowable(drawing)
        w, h = flowable.wrap(200, 1000)
        assert w <= 200 and h > 0


def _shapes(group):
    for shape in group.contents:
        yield shape
        if hasattr(shape, "contents"):
            yield from _shapes(shape)


def _attribute_problems(shape) -> list[str]:
    """What reportlab's check on assignment (reportlab.lib.attrmap.validateSetattr)
    would refuse among the attributes the shape holds: an unknown name or a bad value."""
    attr_map = shape._attrMap
    if not attr_map:
        return []
    problems = []
    for name, value in vars(shape).items():
        if name.startswith("_") or isinstance(value, DerivedValue):
            continue
        if name not in attr_map:
            problems.append(f"{type(shape).__name__}.{name}: not an attribute")
        elif not attr_map[name].validate(value):
            problems.append(f"{type(shape).__name__}.{name}: bad value {value!r}")
    return problems


def test_every_shape_passes_reportlabs_own_attribute_checks():
    # The package turns reportlab's check on every attribute assignment off for speed
    # (decisions/drawings/__init__.py); the same check is made here, after the fact.
    from reportlab import rl_config

    assert rl_config.shapeChecking == 0
    drawings = [*all_charts(), *tree_drawings(big_tree(500), valuation.evaluate(big_tree(500)))]
    tree = load("heating_tree.json")
    drawings += tree_drawings(tree, valuation.evaluate(tree))
    shapes = [shape for drawing in drawings for shape in _shapes(drawing)]
    assert len(shapes) > 1000
    assert [p for shape in shapes for p in _attribute_problems(shape)] == []


def test_the_attribute_check_finds_a_bad_value_and_an_unknown_name():
    line = Line(0, 0, 10, 10)
    line.strokeWidth = "thick"  # accepted now that assignment is not checked
    line.colour = "red"
    assert _attribute_problems(line) == ["Line.strokeWidth: bad value 'thick'",
                                         "Line.colour: not an attribute"]


def test_risk_profile_marks_the_expected_value():
    r = valuation.evaluate(load("heating_payoff_table.json"))
    texts = strings(charts.risk_profile_chart(r["risk_profile"]))
    assert "expected 1,010,000" in texts   # 1,010,000.00 EUR in the result document


def test_sensitivity_chart_labels_each_break_even():
    texts = strings(charts.sensitivity_chart({"label": "P(oil)", "x": [0, 1], "value": [90, 700],
                                              "break_even": [{"value": 0.2375}]}))
    assert "break-even 0.2375" in texts


def test_empty_inputs_draw_a_message_instead_of_failing():
    assert "no outcomes recorded" in strings(charts.outcomes_chart([]))
    assert "no inputs to show" in strings(charts.tornado_chart([], base_value=0))
    assert "no outcomes to show" in strings(charts.risk_profile_chart({}))


@pytest.mark.parametrize(("lo", "hi", "expected"), [
    (0, 10, [0, 2, 4, 6, 8, 10]),
    (-1720000, 2780000, [-2000000, -1000000, 0, 1000000, 2000000, 3000000]),
    (0.21, 0.29, [0.2, 0.22, 0.24, 0.26, 0.28, 0.3]),
])
def test_axis_ticks_are_round_steps_covering_the_range(lo, hi, expected):
    # common practice: steps of 1, 2 or 5 times a power of ten
    assert charts.nice_ticks(lo, hi) == pytest.approx(expected)


# ---- text helpers -------------------------------------------------------------------------------

@pytest.mark.parametrize(("raw", "shown"), [
    ("Zoë Ødegård", "Zoë Ødegård"),          # Windows-1252 letters stay
    ("Łukasz Wiśniewski", "Lukasz Wisniewski"),
    ("Ő Dávid", "O Dávid"),
    ("张伟", "[U+5F20][U+4F1F]"),
])
def test_names_outside_the_standard_fonts_fall_back_visibly(raw, shown):
    assert pdf_safe(raw) == shown


def test_fit_text_shortens_with_an_ellipsis_within_the_width():
    text = fit_text("Extend to the east district", 50, 7)
    assert text.endswith("…") and text_width(text, 7) <= 50
    assert fit_text("short", 50, 7) == "short"


def test_money_matches_the_api_figure_rounded_to_the_cent():
    assert money(300000.00000000006, "EUR") == "300,000.00 EUR"
    assert money(-762407.834627323) == "-762,407.83"
    assert money(None) == "n/a"
