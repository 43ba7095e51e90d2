"""The HTML report: self-contained (nothing fetched), the campaign, the decision and its catalysts,
plots that are well-formed SVG drawn to scale, flags in words, provenance and the safety caution."""
from __future__ import annotations

import math
import re
import shutil
import xml.etree.ElementTree as ET
from html import escape
from html.parser import HTMLParser

import numpy as np
import pytest

from rounds import NOTE, ROUND1, ROUND2, add_second_round

from screenlab.cli import main
from screenlab.cli.report_cmd import report_for
from screenlab.export.shortlist import SAFETY_NOTE
from screenlab.store import Store
from screenlab.viz.svg import _Axis, arrhenius_svg, forest_svg, log_ticks, nice_ticks


@pytest.fixture(scope="module")
def two_rounds(demo_store, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    path = tmp / "store.duckdb"
    shutil.copy2(demo_store, path)
    number = add_second_round(path, tmp)
    return path, number


class _Refs(HTMLParser):
    """Every tag and every attribute that can make a browser fetch something."""

    def __init__(self):
        super().__init__()
        self.tags: list[str] = []
        self.fetching: list[tuple[str, str, str]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        for k, v in attrs:
            if k in ("src", "href", "srcset", "data", "poster", "action", "xlink:href") and v \
                    and not (k == "href" and v.startswith("#")):        # a link within the page fetches nothing
                self.fetching.append((tag, k, v))


def _check_self_contained(html: str) -> _Refs:
    p = _Refs()
    p.feed(html)
    assert "script" not in p.tags and "link" not in p.tags and "iframe" not in p.tags and "img" not in p.tags
    assert not p.fetching, p.fetching
    low = html.lower()
    assert "http://" not in low and "https://" not in low and "@import" not in low and "url(" not in \
        low.replace("url(#", "")
    return p


class _FlagCells(HTMLParser):
    """The flag codes in table cells (``<code>`` inside ``<td>``, with their tooltip) and every
    ``<code>``/meaning pair of the section after ``id='flags'``."""

    def __init__(self):
        super().__init__()
        self.in_td = self.in_code = self.after = False
        self.cells: list[tuple[str, str]] = []       # (code, tooltip) in the tables above the section
        self.explained: dict[str, str] = {}          # code -> the row's meaning cell, in the section
        self._row: list[str] = []
        self._tip = ""

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if a.get("id") == "flags":
            self.after = True
        if tag == "td":
            self.in_td = True
            self._row.append("")
        elif tag == "code":
            self.in_code, self._tip = True, a.get("title", "")
        elif tag == "tr":
            self._row = []

    def handle_endtag(self, tag):
        if tag == "td":
            self.in_td = False
        elif tag == "code":
            self.in_code = False
        elif tag == "tr" and self.after and len(self._row) == 4:     # level, flag, rows, meaning
            self.explained[self._row[1]] = self._row[3]

    def handle_data(self, data):
        if self.in_td and self._row:
            self._row[-1] += data
        if self.in_code and self.in_td and not self.after:
            self.cells.append((data, self._tip))


def _check_flag_cells(html: str, help_: dict[str, str]) -> None:
    """The rule: a table cell shows a flag's code with its sentence as the tooltip, not the sentence
    itself, and every code shown is explained once under "Flags in plain words"."""
    p = _FlagCells()
    p.feed(html)
    assert p.cells, "no flag code in any table"
    for code, tip in p.cells:
        assert tip == help_[code], code
        assert p.explained.get(code) == help_[code], f"{code} is not explained under 'Flags in plain words'"
    above = html.split("id='flags'")[0]
    for code in {c for c, _ in p.cells}:                       # each sentence only as a tooltip above
        assert above.count(escape(help_[code])) == above.count(f">{code}</code>"), code


def test_report_of_the_decision_is_self_contained_and_complete(two_rounds):
    path, number = two_rounds
    html = report_for(Store(path, read_only=True), ROUND1)
    p = _check_self_contained(html)
    assert p.tags.count("svg") >= 2                                   # forest plot and Arrhenius plot
    assert f"<title>ScreenLab report: {ROUND1}</title>" in html
    assert f"Decision {number}: RU-01, RU-02, RU-04" in html and NOTE in html
    for cat in ("RU-01", "RU-02", "RU-04", "REF-RU"):
        assert cat in html
    assert "Rounds after this one: " + ROUND2 in html
    assert SAFETY_NOTE.strip().splitlines()[0] in html and "Provenance" in html and "sha256" in html
    # flags in words: the sentence of a code that the campaign raises, not only the code
    from screenlab.flags import flag_help

    assert flag_help()["edge_effect"] in html
    _check_flag_cells(html, flag_help())
    # the decision's constraints: no option left empty ("enantiomer: ;"), no float printed to 16 digits
    cons = re.search(r"Constraints: ([^<]*)</p>", html).group(1)
    assert not re.search(r": (;|$)", cons), cons
    assert not re.search(r"\d\.\d{5,}", cons), cons
    # every SVG is well-formed XML
    for block in html.split("<svg")[1:]:
        ET.fromstring("<svg" + block.split("</svg>")[0] + "</svg>")


def test_report_of_the_next_round_names_the_round_before(two_rounds):
    path, number = two_rounds
    html = report_for(Store(path, read_only=True), ROUND2)
    _check_self_contained(html)
    assert f"This round follows campaign <b>{ROUND1}</b>, decision {number}" in html
    assert "No decision has been recorded for this campaign yet" in html
    assert "RU-04-B2" in html


def test_report_cli(two_rounds, tmp_path, capsys):
    path, number = two_rounds
    out = tmp_path / "r.html"
    assert main(["report", "--campaign", ROUND1, "--out", str(out), "--decision", str(number),
                 "--store", str(path)]) == 0
    assert out.is_file() and ROUND1 in out.read_text(encoding="utf-8")
    capsys.readouterr()
    assert main(["report", "--campaign", ROUND2, "--out", str(out), "--decision", str(number),
                 "--store", str(path)]) == 2
    assert "was made on campaign" in capsys.readouterr().err
    assert main(["report", "--campaign", "nope", "--out", str(out), "--store", str(path)]) == 1
    assert main(["report", "--campaign", ROUND1, "--out", str(tmp_path), "--store", str(path)]) == 2


def test_ticks_are_round_numbers_covering_the_range():
    for lo, hi in ((0.0, 1.0), (2.91, 3.2), (-7.5, 42.0), (113.0, 420.0)):
        t = nice_ticks(lo, hi)
        step = np.diff(t)
        assert np.allclose(step, step[0])
        mant = step[0] / 10 ** math.floor(math.log10(step[0]))
        assert min(abs(mant - m) for m in (1, 2, 5, 10)) < 1e-9          # 1, 2 or 5 x 10^k
        assert t[0] >= lo - 1e-9 and t[-1] <= hi + 1e-9 and t[0] - step[0] < lo and t[-1] + step[0] > hi
    assert log_ticks(0.05, 500) == [0.1, 1.0, 10.0, 100.0]            # decades over more than 3 decades
    assert log_ticks(100.0, 400.0) == [100.0, 200.0, 300.0, 400.0]    # a narrow span: round linear steps


def test_forest_plot_places_points_on_a_log_axis():
    svg = forest_svg(["a", "b", "c"], [10.0, 100.0, 1.0], [5.0, 80.0, 0.5], [20.0, 130.0, 2.0],
                     x_label="TOF / h-1", log_x=True, highlight=["a"])
    root = ET.fromstring(svg)
    diamonds = [el for el in root.iter("polygon")]
    assert len(diamonds) == 3
    xs = [float(el.get("points").split()[0].split(",")[0]) for el in diamonds]   # the diamond's top vertex
    # equal ratios are equal distances on a log axis: 1 -> 10 -> 100 in equal steps (plain log10 rule)
    x_a, x_b, x_c = xs
    assert (x_b - x_a) == pytest.approx(x_a - x_c, abs=0.2)
    ax = _Axis(0.1, 1000.0, 0.0, 400.0, log=True)
    assert ax(10.0) == pytest.approx(np.interp(np.log10(10.0), [-1, 3], [0, 400]))


def test_arrhenius_plot_draws_every_measured_point():
    t = np.array([40.0, 50.0, 60.0])
    pts = {"temperature_c": t, "tof_per_h": np.array([20.0, 40.0, 80.0]), "tof_ci_low": np.array([15.0, 30, 60]),
           "tof_ci_high": np.array([25.0, 50, 100])}
    line = {"temperature_c": np.linspace(38, 62, 10), "tof_per_h": np.linspace(18, 90, 10),
            "tof_ci_low": np.linspace(15, 80, 10), "tof_ci_high": np.linspace(21, 100, 10)}
    svg = arrhenius_svg([{"name": "X", "points": pts, "line": line},
                         {"name": "REF", "benchmark": True, "points": pts, "line": {}}])
    root = ET.fromstring(svg)
    # X: 3 circles + 1 legend circle; REF: 3 stars + 1 legend star (stars are 10-point polygons)
    assert len(list(root.iter("circle"))) == 4
    assert sum(1 for el in root.iter("polygon") if len(el.get("points").split()) == 10) == 4
    assert "1000/T / K⁻¹" in svg and "ln(TOF / h⁻¹)" in svg and root.find("title").text == "Arrhenius plot"
    # a higher temperature is further left (smaller 1000/T) and a higher TOF further up
    cx = [float(el.get("cx")) for el in root.iter("circle")][:3]
    cy = [float(el.get("cy")) for el in root.iter("circle")][:3]
    assert cx[0] > cx[1] > cx[2] and cy[0] > cy[1] > cy[2]
    # ln TOF is linear in the pixels: equal steps of ln 2 are equal steps up
    assert (cy[0] - cy[1]) == pytest.approx(cy[1] - cy[2], abs=0.2)
