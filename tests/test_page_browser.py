"""The evaluation page as a person sees it: written by `tagger evaluate --html` for a tiny model
trained in its run folder, opened in headless Chromium (Debian's `chromium` package, which .ci/run
installs), read back as the browser built it, and saved as a screenshot beside the run.

Without Chromium the tests skip and say why; they never pass without having looked.
"""

from __future__ import annotations

import re
import shutil
import struct
import subprocess
from pathlib import Path

import pytest
from typer.testing import CliRunner

from tagger.cli import app

runner = CliRunner()

GOLD = (
    "Crew\tO\nswapped\tO\npitch\tB-COMP\nbearing\tI-COMP\non\tO\nT-14\tB-ASSET\n\n"
    "Oil\tB-DEF\nleak\tI-DEF\nnear\tO\nT-3\tB-ASSET\n\n"
)
BROWSER = shutil.which("chromium") or shutil.which("chromium-browser")
SHOT_WIDTH = 1100
# Chromium writes each console message to stderr with --enable-logging=stderr, as
# `[pid:tid:time:INFO:CONSOLE:line] "message", source: url (line)` (seen with Chromium 150).
CONSOLE = re.compile(r":CONSOLE[:(]\d*\)?\]\s*(.*)")

needs_browser = pytest.mark.skipif(
    BROWSER is None,
    reason="no Chromium to open the page in: .ci/run installs Debian's chromium package "
    "(apt-get install -y chromium)",
)


def _browse(page: Path, profile: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    """Chromium run headless on `page`, with its console on stderr and every network request
    sent to a closed local port, so that nothing the page asks for can come from outside."""
    assert BROWSER is not None
    return subprocess.run(
        [
            BROWSER,
            "--headless",
            "--no-sandbox",  # the tests may run as root, where the sandbox refuses to start
            "--disable-gpu",
            "--no-first-run",
            "--enable-logging=stderr",
            "--v=0",
            "--proxy-server=127.0.0.1:9",
            f"--user-data-dir={profile}",
            *extra,
            page.resolve().as_uri(),
        ],
        capture_output=True,
        text=True,
        timeout=180,  # a hung browser fails the test rather than the suite
        check=False,
    )


def _console(stderr: str) -> list[str]:
    return [match.group(1) for match in CONSOLE.finditer(stderr)]


@pytest.fixture(scope="module")
def page(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The page for a tiny model evaluated from its own run folder (so its epochs are drawn)."""
    folder = tmp_path_factory.mktemp("page")
    gold = folder / "gold.txt"
    gold.write_text(GOLD * 3, encoding="utf-8")
    run = folder / "run"
    trained = runner.invoke(
        app,
        [
            "train", "--train", str(gold), "--dev", str(gold), "--out", str(run),
            "--set", "model.hidden_size=8", "--set", "model.layers=1",
            "--set", "train.epochs=3", "--set", "train.threads=1", "--set", "train.seed=1",
        ],
    )  # fmt: skip
    assert trained.exit_code == 0, trained.stderr
    html = run / "report.html"
    evaluated = runner.invoke(
        app, ["evaluate", str(run / "model.tagger"), str(gold), "--html", str(html)]
    )
    assert evaluated.exit_code == 0, evaluated.stderr
    return html


@needs_browser
def test_the_page_loads_without_console_messages_and_shows_its_table_and_charts(
    page: Path, tmp_path: Path
) -> None:
    shown = _browse(page, tmp_path / "profile", "--dump-dom")
    assert shown.returncode == 0, shown.stderr[-2000:]
    assert _console(shown.stderr) == []
    dom = shown.stdout
    table = re.search(r'<table class="per-type">(.*?)</table>', dom, re.S)
    assert table is not None
    assert re.findall(r"<tr><th>([^<]+)</th>", table.group(1)) == [
        "type", "ASSET", "COMP", "DEF", "all spans",
    ]  # fmt: skip
    charts = dict(re.findall(r'<figure class="chart" data-chart="(\w+)">(.*?)</figure>', dom, re.S))
    assert {"scores", "outcomes", "training"} <= set(charts)
    for name, body in charts.items():
        assert "<svg" in body and ("<rect" in body or "<path" in body), name
        assert re.search(r'<ul class="legend">\s*<li>', body), name
    # The browser built the page from the file alone: nothing it could fetch from elsewhere.
    assert not re.search(r"\s(src|href)\s*=\s*\"(https?:)?//", dom)


@needs_browser
def test_a_screenshot_of_the_page_is_saved_beside_the_run(page: Path, tmp_path: Path) -> None:
    shot = page.parent / "report.png"
    taken = _browse(
        page, tmp_path / "profile", f"--screenshot={shot}", f"--window-size={SHOT_WIDTH},2400"
    )
    assert taken.returncode == 0, taken.stderr[-2000:]
    assert _console(taken.stderr) == []
    data = shot.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    width, height = struct.unpack(">II", data[16:24])  # the IHDR chunk: width, height
    assert (width, height) == (SHOT_WIDTH, 2400)


@needs_browser
def test_the_console_check_sees_a_page_that_fails(tmp_path: Path) -> None:
    # The check above would be empty if Chromium never reported anything: a page with a
    # broken script must show up in it.
    broken = tmp_path / "broken.html"
    broken.write_text(
        "<!DOCTYPE html><html><body><script>undefinedCall();</script></body></html>",
        encoding="utf-8",
    )
    shown = _browse(broken, tmp_path / "profile", "--dump-dom")
    assert any("undefinedCall" in message for message in _console(shown.stderr))


@needs_browser
def test_the_learning_curve_page_loads_with_its_chart_and_table(tmp_path: Path) -> None:
    from tagger.reports.page import learning_curve_page

    points = [
        {"fraction": f, "seed": 1, "sentences": n, "f1": 0.9 - 4.0 * n**-0.5, "best_epoch": 3}
        for f, n in ((0.1, 100), (0.4, 400), (1.0, 1000))
    ]
    result = {
        "training_file": "train.txt",
        "scored_file": "dev.txt",
        "training_sentences": 1000,
        "points": points,
        "fit": {"a": 0.9, "b": 4.0, "c": 0.5, "sse": 0.0},
        "doubling": {"sentences": 1000, "now": 0.77, "doubled": 0.81, "low": 0.02,
                     "high": 0.06, "level": 0.95, "resamples": 100},
        "answer": "Doubling the annotation from 1,000 to 2,000 sentences is expected to ...",
        "warnings": [],
    }  # fmt: skip
    page = tmp_path / "curve.html"
    page.write_text(learning_curve_page(result), encoding="utf-8")
    shown = _browse(page, tmp_path / "profile", "--dump-dom")
    assert shown.returncode == 0, shown.stderr[-2000:]
    assert _console(shown.stderr) == []
    assert len(re.findall(r"<tr><th>\d+%</th>", shown.stdout)) == 3
    chart = re.search(r'data-chart="learning-curve">(.*?)</figure>', shown.stdout, re.S)
    assert (
        chart is not None and "<path" in chart.group(1) and '<ul class="legend">' in chart.group(1)
    )
    taken = _browse(page, tmp_path / "profile", f"--screenshot={tmp_path / 'curve.png'}")
    assert taken.returncode == 0 and (tmp_path / "curve.png").read_bytes()[:4] == b"\x89PNG"


@needs_browser
def test_the_cross_validation_page_loads_with_its_chart_and_table(tmp_path: Path) -> None:
    from tagger.reports.page import cross_validation_page

    def entry(values: list[float | None], gold: int) -> dict:
        present = [v for v in values if v is not None]
        mean = sum(present) / len(present)
        return {"f1_per_fold": values, "mean": mean, "sd": 0.05, "min": min(present),
                "max": max(present), "gold": gold}  # fmt: skip

    result = {
        "training_file": "train.txt",
        "folds": 3,
        "sentences": 90,
        "documents": 9,
        "documents_kept_whole": True,
        "summary": {
            "per_type": {"LOC": entry([0.7, 0.8, 0.75], 30), "PER": entry([0.6, None, 0.7], 12)},
            "micro": entry([0.66, 0.8, 0.72], 42),
            "warnings": [],
        },
        "notes": [],
    }
    page = tmp_path / "folds.html"
    page.write_text(cross_validation_page(result), encoding="utf-8")
    shown = _browse(page, tmp_path / "profile", "--dump-dom")
    assert shown.returncode == 0, shown.stderr[-2000:]
    assert _console(shown.stderr) == []
    table = re.search(r'<table class="per-type">(.*?)</table>', shown.stdout, re.S)
    assert table is not None
    assert re.findall(r"<tr><th>([^<]+)</th>", table.group(1)) == [
        "type", "LOC", "PER", "all spans pooled",
    ]  # fmt: skip
    chart = re.search(r'data-chart="folds">(.*?)</figure>', shown.stdout, re.S)
    assert chart is not None and "<circle" in chart.group(1) and "<li>" in chart.group(1)
