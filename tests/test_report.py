"""Outputs of a run: plots, report.html (also in a headless browser), table, CSV, JSON."""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from netgen.results.analysis import analyse
from netgen.design.schema import Design, SimSpec
from netgen.results.plots import plot_all, plot_smith
from netgen.design.records import Component, SizedDesign, Waveforms
from netgen.results.report import format_table, write_metrics_json, write_report, write_waveforms_csv

F0, VDD, PPC = 1e9, 10.0, 400


def synthetic_run(outdir: Path, settled: bool = True, plots: bool = True, pout_w: float | None = None):
    """A class-F-like run built from Fourier series (square-ish voltage, half-sine current)."""
    t = np.arange(3 * PPC) / (PPC * F0)  # three periods, so the CSV must cut to two
    th = 2 * math.pi * F0 * t
    vd = VDD + sum(4 * VDD / (n * math.pi) * np.sin(n * th) for n in (1, 3, 5))
    imax = 8 * VDD / (math.pi * 100)
    i_d = np.maximum(-imax * np.sin(th), 0.0)
    vl = 8.8 * np.sin(th)
    design = Design(name="bench_f", topology="class_f_line", f0_hz=F0, vdd_v=VDD, pout_w=pout_w, sim=SimSpec(harmonics=5))
    comps = {"tank_l": Component("tank_l", "L", 1.59e-9, "Ropt/(w0 QL), parallel tank", "tank")}
    sized = SizedDesign(design, 100.0, comps, {"line_length_m": (0.075, "m", "lambda/4 in air")})
    hist = {"pdc_w": 0.8 + 0.1 * np.exp(-np.arange(30) / 5), "pload_w": 0.77 + 0.1 * np.exp(-np.arange(30) / 6)}
    wf = Waveforms(F0, t, {"drain": vd, "vdd": np.full_like(t, VDD), "load": vl, "mid": vl * 1.01},
                   {"drain": i_d, "switch": i_d, "supply": np.full_like(t, np.mean(i_d))}, settled, 30, hist,
                   "synthetic waveforms")
    net = "* synthetic\nRLOSS_tank_l mid load 0.5\nRLOAD load 0 50\n"
    metrics = analyse(wf, sized, net)
    f = np.linspace(0.05e9, 5.5e9, 300)
    w = 2 * np.pi * f
    z = 1 / (1 / 100 + 1 / (1j * w * 1.59e-9) + 1j * w * 15.9e-12)
    plots = plot_all(outdir, sized, wf, metrics, f, z) if plots else {}
    report = write_report(outdir, sized, metrics, {k: p.name for k, p in plots.items()}, net)
    return sized, wf, metrics, plots, report


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """One settled synthetic run shared by the read-only tests (plots take about a second)."""
    out = tmp_path_factory.mktemp("run")
    return (out, *synthetic_run(out))


class _Imgs(HTMLParser):
    def __init__(self):
        super().__init__()
        self.srcs, self.external = [], []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "img":
            self.srcs.append(a.get("src"))
        for key in ("src", "href"):
            if a.get(key) and re.match(r"^[a-z]+://", a[key]):
                self.external.append(a[key])


def test_plots_are_png_files(run):
    tmp_path, _, _, _, plots, _ = run
    assert set(plots) == {"waveforms", "load_line", "harmonics", "smith", "impedance", "settling"}
    for p in plots.values():
        data = Path(p).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification)
        assert len(data) > 10_000
    assert not list(tmp_path.glob("*.tmp"))  # atomic writes leave no temp files


def test_report_references_existing_images_only(run):
    tmp_path, sized, wf, metrics, plots, report = run
    text = report.read_text(encoding="utf-8")
    p = _Imgs()
    p.feed(text)
    assert len(p.srcs) == len(plots)
    for src in p.srcs:
        assert "/" not in src and (tmp_path / src).is_file()
    assert p.external == []  # self-contained: no external resources
    assert "NOT SETTLED" not in text
    for needle in ("tank_l", "Ropt/(w0 QL), parallel tank", "Raab", "Loss budget", "compliance", "RF burns"):
        assert needle in text


def test_report_short_caution_beside_the_summary_full_text_at_the_end(run):
    text = run[5].read_text(encoding="utf-8")
    summary, metrics_heading, cautions_heading = (text.index("class=summary"), text.index("<h2>Metrics</h2>"),
                                                 text.index("<h2 id=cautions>"))
    short = text.index("id=caution-short")
    assert summary < short < metrics_heading < cautions_heading
    full = text[cautions_heading:]
    # the usual cautions of RF power work: high voltage, burns and exposure, emissions, codes
    for needle in ("High voltage", "RF burns and exposure", "Emission limits", "local codes", "licensed practice"):
        assert needle in full
    assert f"{run[3]['peak_vd_over_vdd']:.2f} x Vdd" in full  # this design's simulated peak


def test_report_shows_the_pout_target_beside_what_was_achieved(tmp_path):
    *_, metrics, _, report = synthetic_run(tmp_path, plots=False, pout_w=1.0)
    text = report.read_text(encoding="utf-8")
    dev = round(100 * (metrics["pout_w"] - 1.0))
    from netgen.design import format_quantity

    assert f"target 1 W, achieved {format_quantity(metrics['pout_w'], 'W')}, {dev:+d} %" in text
    assert "Pout target, design.pout (W)" in text
    # sized from design.ropt: no target to compare with
    *_, report = synthetic_run(tmp_path / "b", plots=False)
    assert "none (sized from design.ropt)" in report.read_text(encoding="utf-8")


def test_report_colours_are_our_own(run):
    # the stock greys of a well-known code-hosting site's stylesheet (text #1f2328 and #24292f,
    # code background #f6f8fa, borders #d0d7de and #d8dee4, muted #656d76 and #57606a) are not used
    css = run[5].read_text(encoding="utf-8").lower()
    for stock in ("#1f2328", "#24292f", "#f6f8fa", "#d0d7de", "#d8dee4", "#656d76", "#57606a", "#eaeef2"):
        assert stock not in css


def test_report_banner_when_not_settled(tmp_path):
    *_, report = synthetic_run(tmp_path, settled=False, plots=False)
    text = report.read_text(encoding="utf-8")
    assert 'id=not-settled>NOT SETTLED' in text


def test_format_table(run):
    metrics = run[3]
    table = format_table(metrics)
    assert all(len(line) <= 80 for line in table.splitlines())
    assert "NOT SETTLED" not in table and "Pout (W)" in table
    unsettled = dict(metrics, settled=False)
    assert "NOT SETTLED" in format_table(unsettled)
    # the value shown is the analysed one (4 significant figures)
    assert f"{metrics['pout_w']:.4g}" in table


def test_metrics_json_has_no_nan(tmp_path):
    m = {"pout_w": float("nan"), "pae": None, "x": np.float64(1.5), "arr": np.array([1.0, np.inf]), "ok": True}
    path = write_metrics_json(tmp_path / "metrics.json", m)
    text = path.read_text()
    assert "NaN" not in text and "Infinity" not in text
    assert json.loads(text) == {"pout_w": None, "pae": None, "x": 1.5, "arr": [1.0, None], "ok": True}


def test_waveforms_csv_keeps_last_two_periods(run, tmp_path):
    wf = run[2]
    path = write_waveforms_csv(tmp_path / "waveforms.csv", wf, periods=2)
    lines = path.read_text().splitlines()
    assert lines[0].startswith("#") and "settled=true" in lines[0]
    header = lines[1].split(",")
    assert header[:2] == ["t_s", "v_drain_v"] and "i_supply_a" in header
    data = np.loadtxt(path, delimiter=",", comments="#", skiprows=2)
    assert data.shape == (2 * PPC, len(header))
    assert_allclose(data[:, 1], wf.v["drain"][PPC:], rtol=1e-8)
    assert_allclose(data[1, 0], 1 / (PPC * F0), rtol=1e-8)


def test_smith_reference_and_output(tmp_path):
    # reflection coefficient (Pozar): Gamma = (Z - Zref)/(Z + Zref); a 100-ohm fundamental on a
    # 100-ohm (Ropt) reference is the centre - check the helper and that a chosen reference works
    from netgen.results.plots import _gamma

    assert _gamma(1.0) == 0
    assert _gamma(0.0) == -1
    m = {"design": {"name": "x", "topology": "y", "ropt_ohm": None}, "settled": True,
         "harmonics": [{"n": 1, "z_re_ohm": 50.0, "z_im_ohm": 0.0}, {"n": 2, "z_re_ohm": None, "z_im_ohm": None}]}
    p = plot_smith(tmp_path / "s.png", m, z_ref_ohm=50.0)
    assert p.read_bytes()[:4] == b"\x89PNG"


def test_smith_reactance_labels_in_the_trades_form():
    # common practice on Smith charts: normalised reactance written +j0.5, -j2 (j before the number)
    from netgen.results.plots import reactance_label

    assert [reactance_label(x) for x in (0.2, 0.5, 1.0, -2.0, -5.0)] == ["+j0.2", "+j0.5", "+j1", "-j2", "-j5"]


def test_smith_labels_clear_of_circle_footnote_and_edges(run, tmp_path, monkeypatch):
    # Looking at the figure as drawn: every reactance label lies outside the outer circle, none
    # overlaps the footnote, and the title and footnote stay inside the figure (nothing clipped).
    import netgen.results.plots as plots

    drawn = {}

    def keep(fig, path):
        fig.canvas.draw()
        drawn["fig"] = fig
        return Path(path)

    monkeypatch.setattr(plots, "_save", keep)
    metrics = dict(run[3], design=dict(run[3]["design"], name="a_rather_long_design_name_for_a_field_unit"))
    plots.plot_smith(tmp_path / "s.png", metrics)
    fig = drawn["fig"]
    ax = fig.axes[0]
    renderer = fig.canvas.get_renderer()
    fig_box = fig.bbox
    centre = ax.transData.transform((0.0, 0.0))
    radius = ax.transData.transform((1.0, 0.0))[0] - centre[0]
    (footnote,) = [t for t in fig.texts if "reference" in t.get_text()]
    foot_box = footnote.get_window_extent(renderer)
    labels = [t for t in ax.texts if t.get_text().startswith(("+j", "-j"))]
    assert len(labels) == 10
    for label in labels:
        box = label.get_window_extent(renderer)
        corners = np.array([[box.x0, box.y0], [box.x0, box.y1], [box.x1, box.y0], [box.x1, box.y1]])
        nearest = np.hypot(*(np.clip(centre, [box.x0, box.y0], [box.x1, box.y1]) - centre))
        assert nearest >= radius * 0.99 or np.all(np.hypot(*(corners - centre).T) > radius), label.get_text()
        assert not box.overlaps(foot_box), label.get_text()
    for text in (ax.title, ax._left_title, footnote):
        box = text.get_window_extent(renderer)
        if text.get_text():
            assert fig_box.x0 <= box.x0 and box.x1 <= fig_box.x1 and fig_box.y0 <= box.y0 and box.y1 <= fig_box.y1


# ------------------------------------------------------------- browser

def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        exe = shutil.which(name)
        if exe:
            return exe
    return None


_CHECK = """<script>
window.addEventListener('load', function () {
  var imgs = Array.prototype.slice.call(document.images);
  var bad = imgs.filter(function (i) { return !(i.complete && i.naturalWidth > 0); });
  document.body.setAttribute('data-imgcheck', (bad.length ? 'bad:' : 'ok:') + imgs.length);
});
</script>"""


@pytest.mark.browser
def test_report_in_headless_browser(run, tmp_path):
    exe = _chromium()
    if exe is None:
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail("chromium is missing in CI; install it (apt-get install -y chromium).")
        pytest.skip("chromium not installed (apt-get install -y chromium)")
    folder, report = run[0], run[5]
    # a copy of the report in the same folder with a checker script: every <img> must decode
    check = folder / "check.html"
    check.write_text(report.read_text(encoding="utf-8").replace("</body>", _CHECK + "</body>"), encoding="utf-8")
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
             "--disable-background-networking", "--disable-component-update", "--disable-sync",
             f"--user-data-dir={tmp_path / 'profile'}"]
    dom = subprocess.run([exe, *flags, "--virtual-time-budget=10000", "--dump-dom", check.as_uri()],
                         capture_output=True, text=True, check=False)
    found = re.search(r'data-imgcheck="([a-z]+):(\d+)"', dom.stdout)
    assert found, f"the checker did not run; chromium said: {dom.stderr[-2000:]}"
    assert found.group(1) == "ok" and int(found.group(2)) == 6, found.group(0)
    shot = tmp_path / "shot.png"
    res = subprocess.run([exe, *flags, f"--screenshot={shot}", "--window-size=1200,3000", report.as_uri()],
                         capture_output=True, text=True, check=False)
    assert shot.is_file(), res.stderr[-2000:]
    import matplotlib.image as mpimg

    pixels = mpimg.imread(shot)
    assert pixels.shape[0] == 3000 and pixels.shape[1] == 1200
    assert pixels[..., :3].std() > 0.05  # not a blank page
