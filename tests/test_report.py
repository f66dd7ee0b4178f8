"""The HTML report: self-contained, every section present, and rendered in a real browser
(headless Chromium, the distribution's package; CI installs it)."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from reconcile.model.board_loader import load_board
from reconcile.data.readings import load_readings
from reconcile.present.report import build_report, write_report

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_data"
PLOTTED = ("board", "readings", "fit", "budget", "diagnosis", "trim", "lot")


@pytest.fixture(scope="module")
def report_file(tmp_path_factory) -> Path:
    from reconcile.lot.characterise import run_lot
    from reconcile.present.plots_lot import plot_lot

    work = tmp_path_factory.mktemp("report")
    board = load_board(SAMPLES / "line_receiver_cb.toml")
    readings = load_readings(SAMPLES / "line_receiver_built.csv", board)
    lot = run_lot(SAMPLES / "lot_jig.toml", SAMPLES / "lot_jig_readings.csv")
    lot_png = plot_lot(lot, work / "lot.png").read_bytes()
    data = build_report(
        board, readings, lot_result=lot, lot_plot=lot_png, work_dir=work, trim_samples=2000
    )
    return write_report(data, work / "report.html")


def _sections(text: str) -> dict[str, str]:
    parts = re.findall(r'<section class="part" id="(\w+)">(.*?)</section>', text, flags=re.S)
    return dict(parts)


@pytest.mark.slow
def test_report_has_every_section_with_an_embedded_plot(report_file):
    text = report_file.read_text(encoding="utf-8")
    sections = _sections(text)
    for key in PLOTTED:
        assert key in sections, key
        assert 'src="data:image/png;base64,' in sections[key], key
    assert "provenance" in sections and "board_sha256" in sections["provenance"]
    assert "Bench safety" in text and "ESD" in text


@pytest.mark.slow
def test_report_needs_no_network(report_file):
    text = report_file.read_text(encoding="utf-8")
    assert not re.search(r'(src|href)="(https?:)?//', text)
    assert "<link" not in text


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


BROWSER_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
)


@pytest.fixture(scope="module")
def chromium() -> str:
    path = _chromium()
    if path is None:
        if os.environ.get("CI") == "true":
            pytest.fail("headless Chromium is required under CI (.ci/run installs it)")
        pytest.skip("no Chromium on this machine: the browser check runs in CI")
    return path


@pytest.mark.slow
def test_report_renders_in_headless_chromium(report_file, chromium, tmp_path):
    url = report_file.resolve().as_uri()
    dom = subprocess.run(
        [chromium, *BROWSER_FLAGS, f"--user-data-dir={tmp_path / 'p1'}",
         "--virtual-time-budget=5000", "--dump-dom", url],
        capture_output=True, text=True, timeout=120,
    )
    assert dom.returncode == 0, dom.stderr[-2000:]
    body = re.search(r"<body([^>]*)>", dom.stdout)
    assert body, dom.stdout[:500]
    attrs = dict(re.findall(r'([\w-]+)="([^"]*)"', body.group(1)))
    # The page's own check: every <img class="plot"> decoded at >= 200 x 100 pixels.
    assert attrs.get("data-rendered") == "ok", attrs
    assert int(attrs["data-plots"]) >= len(PLOTTED)
    assert attrs["data-plots-ok"] == attrs["data-plots"]
    assert int(attrs["data-sections"]) == len(PLOTTED) + 1

    shot = tmp_path / "shot.png"
    res = subprocess.run(
        [chromium, *BROWSER_FLAGS, f"--user-data-dir={tmp_path / 'p2'}",
         "--window-size=1200,4000", f"--screenshot={shot}", url],
        capture_output=True, text=True, timeout=120,
    )
    assert res.returncode == 0 and shot.is_file(), res.stderr[-2000:]
    import matplotlib.image as mpimg

    pixels = mpimg.imread(shot)
    assert pixels.shape[0] >= 3000 and pixels.shape[1] >= 1000
    assert float(pixels[..., :3].std()) > 0.05  # not a blank page


def test_report_embeds_the_parsed_board_not_the_file_with_its_comments(report_file):
    text = report_file.read_text(encoding="utf-8")
    source = (SAMPLES / "line_receiver_cb.toml").read_text(encoding="utf-8")
    comments = [line.split("#", 1)[1].strip() for line in source.splitlines() if "#" in line]
    assert comments, "the sample board should have comments for this check"
    for comment in comments:
        assert comment not in text, comment
    board = load_board(SAMPLES / "line_receiver_cb.toml")
    board_part = _sections(text)["board"]
    assert "comments are not copied" in board_part
    for r in board.resistors.values():  # the values as read, in ohms (self-consistency)
        assert f"&quot;ohms&quot;: {r.ohms!r}" in board_part, r.ref


@pytest.mark.slow
def test_report_shows_the_fitted_frequency_response(report_file):
    # the sample board has coupling capacitors: its fitted Bode plot sits in the fit section
    sections = _sections(report_file.read_text(encoding="utf-8"))
    assert 'alt="frequency response of the fitted board"' in sections["fit"]
