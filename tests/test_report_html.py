"""The self-contained HTML report: its structure, and how it renders in headless Chromium.

Browser method. Chromium (Debian's package; .ci/apt-packages installs it for
CI) loads the report from a file:// URL twice:
1. ``--dump-dom`` with ``--enable-logging=stderr --v=0``: the DOM after
   parsing must hold the tables and the inline figure, and stderr must hold no
   console message from the page. Chromium logs every page console message,
   including script errors and Content-Security-Policy violations, on stderr
   as "...:CONSOLE..." lines. The report has no script and its CSP forbids
   every fetch, so any such line means something tried to run or load. A
   negative control (a page with a script error and an external image) shows
   the harness does see such messages.
2. ``--screenshot``: the PNG must exist, have the window's size and show a
   real page (a good share of non-white pixels), not a blank one.
"""

from __future__ import annotations

import base64
import html.parser
import os
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from fitkit.capture import Capture
from fitkit.errors import OptionError
from fitkit.report.html import render_html_report, write_html_report
from support.report_results import make_result

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
needs_chromium = pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed here "
                                    "(CI installs it from .ci/apt-packages)")


@pytest.fixture(scope="module")
def result():
    return make_result("underdamped", n_edges=2, undetermined=("zeta",),
                       components={"R1": (4.7e3, "Ohm"), "C1": (10e-9, "F")},
                       warnings=("the capture ends 0.4 ms after the last edge; settling time is a lower bound",))


@pytest.fixture(scope="module")
def capture(result):
    seg = result.segments[0]
    return Capture.from_arrays(seg.time, {"drive": np.zeros(seg.time.size), "output": seg.data},
                               path="bench/board_017.csv", layout="two-column scope export",
                               decisions=("delimiter: comma", "time unit: seconds, from the header"),
                               metadata={"Record Length": str(seg.time.size)})


@pytest.fixture(scope="module")
def page(result, capture):
    return render_html_report(result, capture, verdict="inconclusive")


class _Collector(html.parser.HTMLParser):
    """Tags and attributes of a page (Python's own HTML parser)."""

    def __init__(self):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))


def _tags(text: str) -> list[tuple[str, dict]]:
    collector = _Collector()
    collector.feed(text)
    return collector.tags


def test_page_is_self_contained(page):
    tags = _tags(page)
    assert not [t for t, _ in tags if t in ("script", "link", "iframe", "object", "embed")]
    for tag, attrs in tags:
        for key in ("src", "href"):
            value = attrs.get(key) or ""
            assert not re.match(r"^(https?:|//|file:)", value), (tag, key, value)
    assert "@import" not in page
    # the inline SVG refers to its own clip paths by url(#id); nothing else may be a url(...)
    assert all(ref.startswith("#") for ref in re.findall(r"url\(\s*['\"]?([^)'\"]*)", page))
    csp = [a for t, a in tags if t == "meta" and a.get("http-equiv") == "Content-Security-Policy"]
    assert csp and "default-src 'none'" in csp[0]["content"]


def test_page_holds_tables_figure_verdict_and_provenance(page, result):
    tags = _tags(page)
    tables = [a.get("class", "") for t, a in tags if t == "table"]
    for needed in ("quantities parameter", "quantities derived", "quantities component", "selection",
                   "diagnostics", "provenance"):
        assert needed in tables, needed
    assert any(t == "svg" for t, _ in tags)
    assert "Verdict: INCONCLUSIVE" in page
    assert "not determined" in page and '<tr class="undetermined"><td>zeta</td>' in page
    assert "delimiter: comma" in page and "two-column scope export" in page
    assert "settling time is a lower bound" in page
    assert "[9.9216 kHz, 10.078 kHz]" in page       # interval in engineering notation
    for name in result.parameters:
        assert f"<td>{name}</td>" in page


def test_png_figure_option_embeds_a_data_uri(result):
    page = render_html_report(result, figure_format="png")
    img = [a for t, a in _tags(page) if t == "img"]
    assert len(img) == 1 and img[0]["src"].startswith("data:image/png;base64,")
    assert base64.b64decode(img[0]["src"].split(",", 1)[1])[:4] == b"\x89PNG"
    with pytest.raises(OptionError):
        render_html_report(result, figure_format="gif")


def test_text_from_files_is_escaped():
    nasty = make_result("first-order", file="bench/<script>alert(1)</script>.csv",
                        warnings=("level <b>unknown</b> & guessed",))
    page = render_html_report(nasty, {"path": "x", "decisions": ["<img src=x>"]})
    assert "<script>" not in page and "<img src=x>" not in page
    assert "&lt;script&gt;" in page and "&lt;b&gt;unknown&lt;/b&gt; &amp; guessed" in page


def test_write_is_atomic_and_respects_overwrite(tmp_path, result):
    path = tmp_path / "report.html"
    write_html_report(result, path, figure_format="png")
    assert path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert os.listdir(tmp_path) == ["report.html"]
    with pytest.raises(OptionError):
        write_html_report(result, path, overwrite=False)


def test_notebook_view_is_a_fragment(result):
    fragment = result._repr_html_()
    assert fragment.lstrip().startswith("<style>") and "<html" not in fragment
    assert 'src="data:image/png;base64,' in fragment and "Fitted parameters" in fragment


# -- in a real browser -------------------------------------------------------------

def _chromium(tmp: Path, url: str, *extra: str) -> subprocess.CompletedProcess:
    args = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            f"--user-data-dir={tmp / 'profile'}", "--window-size=1200,2000", *extra, url]
    return subprocess.run(args, capture_output=True, text=True, timeout=120)


def _console_lines(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines() if ":CONSOLE" in line or "Uncaught" in line]


@needs_chromium
def test_chromium_harness_sees_console_errors(tmp_path):
    # negative control: a page that errors and fetches must show up in the log
    bad = tmp_path / "bad.html"
    bad.write_text("<!DOCTYPE html><html><head><meta charset='utf-8'><meta http-equiv="
                   "'Content-Security-Policy' content=\"default-src 'none'\"></head><body>"
                   "<img src='https://example.invalid/a.png'><script>missing()</script></body></html>")
    out = _chromium(tmp_path, bad.as_uri(), "--enable-logging=stderr", "--v=0", "--dump-dom")
    assert len(_console_lines(out.stderr)) >= 2


@needs_chromium
def test_report_renders_in_chromium(tmp_path, result, capture):
    path = write_html_report(result, tmp_path / "board_017.html", capture_provenance=capture,
                             verdict="inconclusive")
    out = _chromium(tmp_path, path.as_uri(), "--enable-logging=stderr", "--v=0", "--dump-dom")
    assert out.returncode == 0, out.stderr[-2000:]
    assert _console_lines(out.stderr) == []
    dom = _tags(out.stdout)
    tables = [a.get("class", "") for t, a in dom if t == "table"]
    assert {"quantities parameter", "quantities derived", "quantities component", "selection",
            "diagnostics", "provenance"} <= set(tables)
    assert any(t == "svg" for t, _ in dom)
    assert len([t for t, _ in dom if t == "tr"]) > 30
    assert "Verdict: INCONCLUSIVE" in out.stdout

    shot = tmp_path / "shot.png"
    out = _chromium(tmp_path, path.as_uri(), f"--screenshot={shot}")
    assert shot.exists(), out.stderr[-2000:]
    from matplotlib.image import imread
    pixels = imread(shot)
    assert pixels.shape[:2] == (2000, 1200)
    ink = np.mean(np.min(pixels[..., :3], axis=2) < 0.9)   # share of non-white pixels
    assert ink > 0.05
    assert shot.stat().st_size > 50_000


@pytest.mark.parametrize("verdict,shown", [({"overall": "fail"}, "Verdict: FAIL"), ("pass", "Verdict: PASS"),
                                           (None, None)])
def test_verdict_banner_from_the_check(verdict, shown):
    page = render_html_report(make_result("first-order"), verdict=verdict, figure_format="png")
    if shown is None:
        assert "Verdict:" not in page
    else:
        assert shown in page and f'class="verdict {shown.split()[-1].lower()}"' in page


def test_extra_sections_for_later_stages():
    page = render_html_report(make_result("first-order"), figure_format="png",
                              extra_sections=[("Suspects", "<table class='suspects'><tr><td>C1</td></tr></table>")])
    assert "<h2>Suspects</h2><table class='suspects'>" in page


@pytest.fixture(scope="module")
def check_result():
    """A failing board check of a demo capture: C31 drifted (demo_captures/README.md)."""
    from fitkit.check import check_capture
    from fitkit.io import load_capture
    demo = Path(__file__).resolve().parents[1] / "demo_captures"
    capture = load_capture(demo / "drifted_board_sallen_key.csv")
    return check_capture(capture, demo / "designs" / "sallen_key_lowpass.toml", envelope_trials=20), capture


@needs_chromium
def test_check_report_renders_in_chromium_with_verdict_and_suspects(tmp_path, check_result):
    from fitkit.report.check_tables import write_check_report
    result, capture = check_result
    assert result.verdict == "fail"
    path = write_check_report(result, tmp_path / "board_check.html", capture_provenance=capture)
    out = _chromium(tmp_path, path.as_uri(), "--enable-logging=stderr", "--v=0", "--dump-dom")
    assert out.returncode == 0, out.stderr[-2000:]
    assert _console_lines(out.stderr) == []
    dom = _tags(out.stdout)
    tables = [a.get("class", "") for t, a in dom if t == "table"]
    assert {"check-behaviour", "check-parts", "check-suspects", "quantities parameter", "provenance"} <= set(tables)
    assert any(t == "svg" for t, _ in dom)
    assert "Verdict: FAIL" in out.stdout
    # the leading suspect is named in its table row and in the figure's box
    assert re.search(r'<tr class="named"><td>1=?</td><td>C31</td>', out.stdout)
    assert "design tolerance envelope" in out.stdout

    shot = tmp_path / "check_shot.png"
    out = _chromium(tmp_path, path.as_uri(), f"--screenshot={shot}")
    assert shot.exists(), out.stderr[-2000:]
    from matplotlib.image import imread
    pixels = imread(shot)
    assert pixels.shape[:2] == (2000, 1200)
    assert np.mean(np.min(pixels[..., :3], axis=2) < 0.9) > 0.05
