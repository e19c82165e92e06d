"""The audit report people read: the self-contained HTML report rendered in a real browser
(headless Chromium), the number format of the tables, the figures' plane and binned spread.

The browser test skips when Chromium is absent, unless OBSPREP_REQUIRE_BROWSER is set (CI sets
it): then it fails, so the report is never passed unseen."""

from __future__ import annotations

import base64
import io
import json
import os
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from obsprep.audit import audit
from obsprep.audit.figures import MapPlane, spread_bins
from obsprep.audit.html import report_html
from obsprep.audit.presentation import FACTOR_HEADER, format_value, sensor_columns
from obsprep.audit.report import summary_markdown
from obsprep.demo import write_demo
from obsprep.run.build import build

SCALE = 0.05
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"      # PNG specification (ISO/IEC 15948), file signature
#: probe appended to a copy of the report (the report itself has no script): after the load
#: event every image is decoded or broken; its state is written into the DOM that is dumped
PROBE = """<pre id="probe"></pre><script>
window.addEventListener("load", function () {
  var found = [];
  document.querySelectorAll("figure[data-figure] img").forEach(function (img) {
    found.push({figure: img.parentElement.getAttribute("data-figure"), complete: img.complete,
                width: img.naturalWidth, height: img.naturalHeight});
  });
  document.getElementById("probe").textContent = JSON.stringify(found);
});
</script>"""


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    paths = write_demo(tmp_path_factory.mktemp("audit_report"), scale=SCALE)
    built = build(paths["config"])
    return audit(built.outputs["netcdf"].parent, ensemble=[paths["ensemble"]])


class _Document(HTMLParser):
    """Tables (name -> header cells, body rows), figures (name -> img src) and the probe text
    of an HTML document."""

    def __init__(self):
        super().__init__()
        self.tables, self.figures, self.probe, self.scripts = {}, {}, "", 0
        self._table = self._figure = None
        self._in_head = self._in_probe = False
        self._cell = None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "table" and "data-table" in attrs:
            self._table = {"header": [], "rows": 0}
            self.tables[attrs["data-table"]] = self._table
        elif tag == "thead":
            self._in_head = True
        elif tag == "tr" and self._table is not None and not self._in_head:
            self._table["rows"] += 1
        elif tag == "th" and self._table is not None:
            self._cell = []
        elif tag == "figure" and "data-figure" in attrs:
            self._figure = attrs["data-figure"]
        elif tag == "img" and self._figure is not None:
            self.figures[self._figure] = attrs.get("src", "")
        elif tag == "pre" and attrs.get("id") == "probe":
            self._in_probe = True
        elif tag == "script":
            self.scripts += 1

    def handle_endtag(self, tag):
        if tag == "table":
            self._table = None
        elif tag == "thead":
            self._in_head = False
        elif tag == "th" and self._cell is not None:
            self._table["header"].append("".join(self._cell))
            self._cell = None
        elif tag == "figure":
            self._figure = None
        elif tag == "pre":
            self._in_probe = False

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)
        if self._in_probe:
            self.probe += data


def _parse(text) -> _Document:
    document = _Document()
    document.feed(text)
    return document


def _decoded_png(uri):
    from PIL import Image

    prefix = "data:image/png;base64,"
    assert uri.startswith(prefix), uri[:40]
    data = base64.b64decode(uri[len(prefix):], validate=True)
    assert data[:8] == PNG_SIGNATURE
    image = Image.open(io.BytesIO(data))
    image.load()                                   # decodes every row: a broken PNG raises
    return image


def _chromium() -> str:
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        message = "headless Chromium not found (Debian package chromium)"
        if os.environ.get("OBSPREP_REQUIRE_BROWSER"):
            pytest.fail(f"{message}, and OBSPREP_REQUIRE_BROWSER is set")
        pytest.skip(message)
    return browser


def _rendered_dom(report: Path, tmp_path: Path) -> str:
    probed = tmp_path / "probed_report.html"
    text = report.read_text(encoding="utf-8")
    probed.write_text(text.replace("</body>", PROBE + "\n</body>"), encoding="utf-8")
    command = [_chromium(), "--headless", "--no-sandbox", "--disable-gpu",
               "--disable-background-networking", "--disable-component-update", "--disable-sync",
               "--no-first-run", f"--user-data-dir={tmp_path / 'profile'}", "--dump-dom",
               probed.resolve().as_uri()]
    done = subprocess.run(command, capture_output=True, text=True, timeout=180)
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout


def test_report_html_renders_every_table_and_figure_in_chromium(demo_report, tmp_path):
    report = demo_report.outputs["report.html"]
    dom = _parse(_rendered_dom(report, tmp_path))
    expected_tables = {"verdicts": demo_report.summary, "summary": demo_report.summary,
                       "collocation": demo_report.collocation, "triple": demo_report.triple,
                       "innovations": demo_report.innovations}
    for name, frame in expected_tables.items():
        assert len(frame), name                    # the demo has every kind of table
        assert name in dom.tables, (name, sorted(dom.tables))
        assert dom.tables[name]["rows"] == len(frame), name
    for name in ("rejections", "noise", "configuration"):
        assert name in dom.tables, name
    # tables are generic: every column of the DataFrame is a header of its table
    for name in ("collocation", "triple", "innovations"):
        assert dom.tables[name]["header"] == [str(c) for c in expected_tables[name].columns]
    assert dom.tables["summary"]["header"] == [str(c) for c in sensor_columns(demo_report.summary)]
    assert dom.tables["verdicts"]["header"][:4] == ["sensor", "quantity", "flag", FACTOR_HEADER]
    # every column of the summary is shown in one of the tables made from it
    shown = set().union(*(dom.tables[name]["header"] for name in
                          ("verdicts", "noise", "summary", "configuration", "rejections")))
    # (a rejection reason without any rejection is left out of the rejections table)
    never_used = {c for c in demo_report.summary if c.startswith("rejected_")
                  and not demo_report.summary[c].fillna(0).gt(0).any()}
    assert set(demo_report.summary.columns) - shown == never_used
    # every figure is in the DOM, its data URI decodes to the PNG on disk, and the browser
    # decoded it to the same size
    stems = [p.stem for p in demo_report.figures]
    assert set(stems) == {"factors", "counts_map", "innovation_map", "normalised_innovations",
                          "spread_vs_error"}
    assert set(dom.figures) == set(stems)
    rendered = {entry["figure"]: entry for entry in json.loads(dom.probe)}
    assert set(rendered) == set(stems)
    for path in demo_report.figures:
        image = _decoded_png(dom.figures[path.stem])
        assert base64.b64decode(dom.figures[path.stem].split(",", 1)[1]) == path.read_bytes()
        state = rendered[path.stem]
        assert state["complete"] and (state["width"], state["height"]) == image.size, state


def test_report_html_is_self_contained(demo_report):
    text = demo_report.outputs["report.html"].read_text(encoding="utf-8")
    dom = _parse(text)
    assert dom.scripts == 0                        # opens without JavaScript
    for uri in dom.figures.values():
        assert uri.startswith("data:image/png;base64,")
    assert "http://" not in text and "https://" not in text   # nothing fetched from a server
    # the verdict table comes before every other table
    assert text.index('data-table="verdicts"') < min(
        text.index(f'data-table="{name}"') for name in dom.tables if name != "verdicts")


def test_figures_are_at_least_120_dpi(demo_report):
    from PIL import Image

    for path in demo_report.figures:
        with Image.open(path) as image:            # matplotlib writes the PNG pHYs chunk
            assert min(image.info["dpi"]) >= 119.9, (path.name, image.info.get("dpi"))


# --- numbers and text ---------------------------------------------------------------------------

@pytest.mark.parametrize("value", [0.00298, 0.0123456, 0.5, 1.0049, 2.17, 9.996, 12.345, 99.96,
                                   0.000123])
def test_numbers_keep_three_significant_digits(value):
    # reference: the "g" presentation of Python's format mini-language with the alternate form
    # "#" (trailing zeros kept, as C's %#g), which is positional for exponents -4 to 2
    reference = f"{value:#.3g}".rstrip(".")
    assert format_value(value) == reference


def test_large_small_and_missing_numbers():
    assert format_value(335.42) == "335" and format_value(29864.3) == "29864"
    assert format_value(3.0) == "3" and format_value(np.int64(12)) == "12"
    assert format_value(np.nan) == "" and format_value(None) == ""
    assert float(format_value(1.234e-6)) == pytest.approx(1.23e-6, rel=1e-12)


def _fake_result(summary, **tables):
    run = SimpleNamespace(directory=Path("/runs/night <1>"), files=[Path("superobs_x.nc")])
    empty = pd.DataFrame()
    return SimpleNamespace(run=run, summary=summary, tolerance=1.5, figures=[],
                           model_description="ensemble of 3 members & more",
                           collocation=tables.get("collocation", empty),
                           triple=tables.get("triple", empty),
                           innovations=tables.get("innovations", empty))


def test_a_small_factor_is_printed_with_its_digits_and_interval():
    summary = pd.DataFrame([{"sensor": "alt", "quantity": "sea_level_anomaly",
                             "flag": "too_large", "factor": 0.00298, "factor_low": 0.0025,
                             "factor_high": 0.0035, "reason": "errors look too large",
                             "new_column_of_the_audit": 7.25}])
    result = _fake_result(summary)
    page = report_html(result)
    assert "0.00298 (0.00250 to 0.00350)" in page
    assert "0.00" not in page.replace("0.00298", "").replace("0.00250", "").replace("0.00350", "")
    assert "new_column_of_the_audit" in _parse(page).tables["summary"]["header"]
    text = summary_markdown(result)
    assert "F = **0.00298** (0.00250 to 0.00350)" in text


def test_old_summary_columns_give_the_factor_with_its_standard_error():
    summary = pd.DataFrame([{"sensor": "alt", "quantity": "sea_level_anomaly",
                             "flag": "too_small", "suggested_factor": 2.17,
                             "suggested_factor_se": 0.0171, "reason": "too small"}])
    page = report_html(_fake_result(summary))
    assert "2.17 ± 0.017" in page


def test_text_is_escaped():
    summary = pd.DataFrame([{"sensor": "<b>x</b>", "quantity": "q&a", "flag": "ok",
                             "factor": 1.0, "reason": 'a "quoted" <reason>'}])
    page = report_html(_fake_result(summary))
    assert "<b>x</b>" not in page and "&lt;b&gt;x&lt;/b&gt;" in page
    assert "&lt;reason&gt;" in page and "night &lt;1&gt;" in page and "&amp; more" in page


# --- figures ---------------------------------------------------------------------------------------

def test_binned_spread_of_a_constant_error_is_one_point_at_the_error():
    # Monte Carlo (numpy): groups of n Gaussian values with sigma 0.3; E[s^2] = sigma^2
    rng = np.random.default_rng(11)
    sigma, n, groups = 0.3, 5, 4000
    spread = rng.normal(0.0, sigma, (groups, n)).std(axis=1, ddof=1)
    binned = spread_bins(np.full(groups, sigma), spread, np.full(groups, n - 1.0))
    assert len(binned) == 1
    row = binned.iloc[0]
    assert row["error"] == pytest.approx(sigma, rel=1e-12)
    assert row["spread"] == pytest.approx(np.sqrt(np.mean(spread ** 2)), rel=1e-12)
    # standard error of the rms of a scaled chi-square variance: sigma / sqrt(2 dof) (textbook)
    expected_se = sigma / np.sqrt(2.0 * groups * (n - 1))
    assert row["spread_se"] == pytest.approx(expected_se, rel=0.1)
    assert abs(row["spread"] - sigma) < 5.0 * expected_se


def test_binned_spread_separates_two_errors():
    rng = np.random.default_rng(5)
    errors = np.repeat([0.1, 0.4], 500)
    spread = rng.normal(0.0, 1.0, (1000, 4)).std(axis=1, ddof=1) * errors
    binned = spread_bins(errors, spread, np.full(1000, 3.0))
    assert list(binned["error"]) == pytest.approx([0.1, 0.4], rel=1e-12)
    assert (np.abs(binned["spread"] - binned["error"]) < 5.0 * binned["spread_se"]).all()


def test_map_plane_of_each_grid_kind():
    from obsprep.geo.grid.curvilinear import CurvilinearGrid
    from obsprep.geo.grid.projected import ProjectedGrid
    from obsprep.geo.grid.regular import RegularGrid

    regular = MapPlane(RegularGrid(170.0, -60.0, 0.5, 0.25, 40, 8), (8, 40))
    # cell corners at lon_min + i dlon, lat_min + j dlat, unwrapped across the dateline
    assert regular.corners_x[0, -1] == pytest.approx(190.0)
    assert regular.corners_y[-1, 0] == pytest.approx(-58.0)
    assert "longitude" in regular.xlabel
    projected = MapPlane(ProjectedGrid("EPSG:3031", -1.0e6, -2.0e6, 1.0e4, 2.0e4, 30, 20),
                         (20, 30))
    assert projected.corners_x[0, 1] - projected.corners_x[0, 0] == pytest.approx(10.0)  # km
    assert projected.corners_y[1, 0] - projected.corners_y[0, 0] == pytest.approx(20.0)
    lon, lat = np.meshgrid(np.linspace(-30.0, -20.0, 12), np.linspace(-70.0, -65.0, 9))
    curvilinear = MapPlane(CurvilinearGrid(lon, lat), lon.shape)
    x, y = curvilinear.to_plane(lon, lat)
    # interior cell centres lie at the mean of their four interpolated corners (within 1 %
    # of a cell: the plane is smooth over a cell)
    cx = 0.25 * (curvilinear.corners_x[:-1, :-1] + curvilinear.corners_x[1:, 1:]
                 + curvilinear.corners_x[1:, :-1] + curvilinear.corners_x[:-1, 1:])
    width = np.abs(np.diff(x, axis=1)).mean()
    assert np.abs(cx[1:-1, 1:-1] - x[1:-1, 1:-1]).max() < 0.01 * width
    without = MapPlane(None, (5, 7))
    assert "grid-index" in without.note and without.corners_x.shape == (6, 8)


def test_figures_without_a_grid_and_on_a_regular_grid(tmp_path):
    from PIL import Image

    from obsprep.audit import figures
    from obsprep.geo.grid.regular import RegularGrid

    rng = np.random.default_rng(3)
    n = 300
    frame = pd.DataFrame({"sensor": np.repeat(["alt_a", "sst_b"], n // 2),
                          "quantity": np.repeat(["sea_level_anomaly", "sea_surface_temperature"],
                                                n // 2),
                          "i": rng.integers(0, 40, n), "j": rng.integers(0, 8, n),
                          "count": rng.integers(1, 6, n), "error_raw_rms": 0.05,
                          "spread": np.abs(rng.normal(0.05, 0.01, n)), "spread_detrended": np.nan,
                          "innovation": rng.normal(0.0, 0.1, n)})
    frame["normalised_innovation"] = frame["innovation"] / 0.1
    frame.loc[0, "i"] = 400                  # outside both grids: counted in the title, not drawn
    grid = RegularGrid(170.0, -60.0, 0.5, 0.25, 40, 8)
    made = [figures.counts_map(frame, tmp_path / "counts_none.png", (8, 40)),
            figures.counts_map(frame, tmp_path / "counts_regular.png", grid=grid),
            figures.innovation_map(frame, tmp_path / "innovation_regular.png", grid=grid),
            figures.normalised_innovation_histograms(frame, tmp_path / "histograms.png"),
            figures.spread_vs_error(frame, tmp_path / "spread.png")]
    for path in made:
        with Image.open(path) as image:
            image.load()
            assert min(image.info["dpi"]) >= 119.9, path.name
    # nothing left behind by the atomic writes
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in made)


def test_factor_figure_draws_rows_with_a_factor(tmp_path):
    from PIL import Image

    from obsprep.audit import figures

    summary = pd.DataFrame({"sensor": ["a", "b", "c"], "quantity": ["q", "q", "q"],
                            "flag": ["too_large", "ok", "no_evidence"],
                            "factor": [0.003, 1.01, np.nan], "factor_low": [0.0025, -0.1, np.nan],
                            "factor_high": [0.0035, 1.2, np.nan]})
    path = figures.factor_intervals(summary, tmp_path / "factors.png", 1.5)
    with Image.open(path) as image:
        image.load()
        assert min(image.info["dpi"]) >= 119.9
    assert figures.factor_intervals(summary.iloc[2:], tmp_path / "none.png", 1.5) is None
    assert not (tmp_path / "none.png").exists()
