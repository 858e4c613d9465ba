"""Tests of the evaluation page without a browser: the sentences it picks as the worst, the
geometry of its charts, what the page holds and leaves out (nothing fetched, input escaped, a
legend on every chart), and reading the run's epochs beside the model."""

from __future__ import annotations

import importlib.util
import json
import re
from pathlib import Path

import pytest

from tagger.data.schemes import Span
from tagger.errors import ConfigError
from tagger.reports import charts
from tagger.reports.page import EPOCHS_NAME, evaluation_page, require_report_extra, run_epochs
from tagger.scoring.examples import PairedSentence, worst_sentences
from tagger.scoring.metrics import SpanCounts, count_sentence, summarise
from tagger.training.records import HISTORY_NAMES

# --- the worst sentences ----------------------------------------------------------------------


def _paired(gold: list[Span], tagged: list[Span], line: int) -> PairedSentence:
    return PairedSentence("gold.txt", line, ["w"] * 8, gold, tagged)


def test_worst_sentences_rank_by_spans_on_one_side_only_ties_in_file_order() -> None:
    sentences = [
        _paired([("A", 0, 1)], [("A", 0, 1)], 1),  # no error: never listed
        _paired([("A", 0, 1)], [("B", 0, 1)], 4),  # 2 errors (the gold span and the tagged one)
        _paired([("A", 0, 2), ("B", 3, 4)], [("A", 0, 1)], 7),  # 3 errors
        _paired([], [("B", 5, 6)], 9),  # 1 error
        _paired([("A", 2, 3)], [], 12),  # 1 error, after the one at line 9
    ]
    worst = worst_sentences(sentences, 10)
    assert [(s["line"], s["errors"]) for s in worst] == [(7, 3), (4, 2), (9, 1), (12, 1)]
    assert worst[0]["gold"] == [["A", 0, 2], ["B", 3, 4]] and worst[0]["tagged"] == [["A", 0, 1]]
    assert [s["line"] for s in worst_sentences(sentences, 2)] == [7, 4]
    assert worst_sentences(sentences, 0) == []


# --- chart geometry ---------------------------------------------------------------------------


def test_score_bars_are_as_long_as_their_scores() -> None:
    per_type = {
        "LOC": {"precision": 1.0, "recall": 0.5, "f1": 2 / 3},
        "PER": {"precision": 0.25, "recall": 0.0, "f1": 0.0},
    }
    chart = charts.score_bars(per_type)
    widths = [rect["width"] for rect in chart.rects]
    expected = [1.0, 0.5, 2 / 3, 0.25, 0.0, 0.0]
    assert widths == pytest.approx([v * charts.PLOT_WIDTH for v in expected], abs=0.01)
    assert [entry["label"] for entry in chart.legend] == ["precision", "recall", "F1"]
    # each bar's colour is its legend entry's
    assert [rect["fill"] for rect in chart.rects[:3]] == [e["colour"] for e in chart.legend]


def test_outcome_bars_stack_the_counts_of_each_type_in_proportion() -> None:
    gold = {"exact": 6, "wrong_type": 1, "boundary": 0, "type_and_boundary": 0, "missed": 3}
    predicted = {k: 0 for k in ("exact", "wrong_type", "boundary", "type_and_boundary")}
    breakdown = {
        "LOC": {"gold": gold, "predicted": {**predicted, "spurious": 2}},
        "PER": {
            "gold": dict.fromkeys(gold, 0) | {"missed": 6},
            "predicted": {**predicted, "spurious": 0},
        },
    }
    chart = charts.outcome_bars(breakdown)
    loc = [rect for rect in chart.rects if rect["title"].startswith("LOC")]
    # the widest bar (LOC: 12 spans) fills the plot; segments keep their counts' proportions
    assert sum(rect["width"] for rect in loc) == pytest.approx(charts.PLOT_WIDTH, abs=0.05)
    assert [rect["width"] for rect in loc] == pytest.approx(
        [n * charts.PLOT_WIDTH / 12 for n in (6, 1, 3, 2)], abs=0.01
    )
    assert loc[0]["x"] == charts.LABEL_WIDTH
    assert all(
        a["x"] + a["width"] == pytest.approx(b["x"], abs=0.02)
        for a, b in zip(loc[:-1], loc[1:], strict=True)
    )
    assert len(chart.legend) == len(charts.OUTCOMES)


@pytest.mark.parametrize(
    ("widest", "ticks"), [(1, [0, 1]), (7, [0, 2, 4, 6]), (702, [0, 200, 400, 600])]
)
def test_count_axis_ticks_are_round(widest: int, ticks: list[int]) -> None:
    assert charts._count_ticks(widest) == ticks


def test_confusion_grid_shades_by_count_and_leaves_the_diagonal_blank() -> None:
    chart = charts.confusion_grid(["A", "B"], {"A": {"B": 4}, "B": {"A": 1}})
    cells = {rect["title"]: rect for rect in chart.rects}
    assert cells["gold A, tagged B: 4"]["opacity"] == 1.0  # the largest count is fully shaded
    assert cells["gold B, tagged A: 1"]["opacity"] == pytest.approx(0.15 + 0.85 / 4, abs=1e-3)
    assert cells["gold A, tagged A: 0"]["fill"] == "#ffffff"
    assert sorted(t["text"] for t in chart.texts if t["anchor"] == "middle") == ["1", "4"]
    assert chart.legend


def test_training_curve_marks_the_last_best_epoch() -> None:
    history = [
        {"epoch": e, "dev_f1": f, "dev_precision": f, "dev_recall": f, "best": best}
        for e, f, best in ((1, 0.2, True), (2, 0.6, True), (3, 0.5, False))
    ]
    chart = charts.training_curve(history)
    (kept,) = [line for line in chart.lines if line["kind"] == "best"]
    xs = sorted({mark["x"] for mark in chart.marks})
    assert kept["x1"] == xs[1]  # epoch 2, the model the run kept
    assert len(chart.paths) == 3 and len(chart.marks) == 9
    assert {entry["marker"] for entry in chart.legend} >= {"circle", "square", "triangle"}


# --- the page ---------------------------------------------------------------------------------


def _result(gold_type: str = "LOC", token: str = "Oslo") -> dict:
    counts = SpanCounts()
    count_sentence(counts, [(gold_type, 0, 1), ("PER", 2, 3)], [("PER", 0, 1), ("PER", 2, 3)])
    count_sentence(counts, [("PER", 0, 2)], [("PER", 0, 1), (gold_type, 3, 4)])
    summary = summarise(counts)
    return {
        "files": [{"file": "gold.txt", "sentences": 2}],
        "overall": summary,
        "input_scheme": "IOB2",
        "worst": worst_sentences(
            [
                PairedSentence(
                    "gold.txt",
                    1,
                    [token, "met", "Bob"],
                    [(gold_type, 0, 1), ("PER", 2, 3)],
                    [("PER", 0, 1), ("PER", 2, 3)],
                ),
                PairedSentence(
                    "gold.txt",
                    5,
                    ["Ann", "Lee", "in", "Rome"],
                    [("PER", 0, 2)],
                    [("PER", 0, 1), (gold_type, 3, 4)],
                ),
            ],
            5,
        ),
    }


HISTORY = [
    {"epoch": 1, "dev_f1": 0.4, "dev_precision": 0.5, "dev_recall": 0.3, "best": True},
    {"epoch": 2, "dev_f1": 0.7, "dev_precision": 0.7, "dev_recall": 0.7, "best": True},
]


def test_the_page_holds_the_table_every_chart_with_its_legend_and_the_worst_sentences() -> None:
    page = evaluation_page(_result(), HISTORY)
    rows = re.findall(r"<tr><th>([^<]+)</th>", page)
    assert rows == ["type", "LOC", "PER", "all spans"]  # the header row, the types, the total
    figures = re.findall(r'<figure class="chart" data-chart="(\w+)">(.*?)</figure>', page, re.S)
    assert [name for name, _ in figures] == ["scores", "outcomes", "confusion", "training"]
    for name, body in figures:
        assert '<ul class="legend">' in body and "<li>" in body, name
    # the worst sentence (3 spans wrong) comes first, each span boxed with its type
    assert page.index("gold.txt:5") < page.index("gold.txt:1")
    assert ">Ann Lee<sub>PER</sub></span>" in page  # the gold span, two tokens in one box
    assert 'class="span wrong"' in page and 'class="span"' in page


def test_the_page_fetches_nothing_and_escapes_what_the_files_hold() -> None:
    page = evaluation_page(_result(gold_type="<b>X</b>", token="<script>alert(1)</script>"), None)
    assert "<script" not in page.lower() and "<b>X</b>" not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page and "&lt;b&gt;X&lt;/b&gt;" in page
    # nothing the browser would load: no src/href attributes, no url() or @import in the styles
    assert not re.search(r"\s(src|href)\s*=", page) and "url(" not in page
    assert "@import" not in page and "http" not in page
    assert f"No {EPOCHS_NAME} was found" in page  # no history: said, not a blank section
    assert "@media print" in page


def test_a_page_without_confusion_or_errors_says_so() -> None:
    counts = SpanCounts()
    count_sentence(counts, [("PER", 0, 1)], [("PER", 0, 1)])
    result = {
        "files": [{"file": "g.txt", "sentences": 1}],
        "overall": summarise(counts),
        "worst": [],
    }
    page = evaluation_page(result, HISTORY)
    assert "No span had the right edges and another type." in page
    assert "Every sentence was tagged exactly as in gold." in page
    assert 'data-chart="confusion"' not in page


def test_without_jinja2_the_page_names_the_extra_to_install(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    real = importlib.util.find_spec
    monkeypatch.setattr(
        importlib.util, "find_spec", lambda name, *a: None if name == "jinja2" else real(name, *a)
    )
    with pytest.raises(ConfigError, match=r"pip install 'tagger\[report\]'"):
        require_report_extra()


# --- the run's epochs -------------------------------------------------------------------------


def test_the_epochs_file_is_the_one_training_writes() -> None:
    assert HISTORY_NAMES[0] == EPOCHS_NAME


def test_run_epochs_reads_the_rows_beside_the_model(tmp_path: Path) -> None:
    (tmp_path / EPOCHS_NAME).write_text(json.dumps(HISTORY), encoding="utf-8")
    assert run_epochs(tmp_path / "model.tagger") == (HISTORY, "")


@pytest.mark.parametrize(
    ("content", "said"),
    [
        (None, "No epochs.json beside the model"),
        ("{not json", "could not be read"),
        (b"\xff\xfe[]", "could not be read"),
        ("[]", "holds no epoch rows"),
        ('[{"epoch": 1, "dev_f1": "high"}]', "holds no epoch rows"),
    ],
)
def test_run_epochs_says_why_there_is_no_curve(
    tmp_path: Path, content: str | bytes | None, said: str
) -> None:
    if isinstance(content, bytes):
        (tmp_path / EPOCHS_NAME).write_bytes(content)
    elif content is not None:
        (tmp_path / EPOCHS_NAME).write_text(content, encoding="utf-8")
    rows, note = run_epochs(tmp_path / "model.tagger")
    assert rows is None and said in note


# --- the learning curve's page ----------------------------------------------------------------

CURVE_RESULT = {
    "training_file": "train<1>.txt",
    "scored_file": "dev.txt",
    "training_sentences": 400,
    "points": [
        {"fraction": f, "seed": s, "sentences": n, "f1": 0.9 - 4.0 * n**-0.5, "best_epoch": 2}
        for f, n in ((0.25, 100), (0.5, 200), (1.0, 400))
        for s in (1, 2)
    ],
    "fit": {"a": 0.9, "b": 4.0, "c": 0.5, "sse": 0.0},
    "doubling": {"sentences": 400, "now": 0.7, "doubled": 0.9 - 4.0 * 800**-0.5,
                 "low": 0.03, "high": 0.09, "level": 0.95, "resamples": 100},
    "answer": "Doubling the annotation from 400 to 800 sentences is expected to ...",
    "warnings": ["25% (100 sentences, seed 2) holds no example of <DEF>"],
}  # fmt: skip


def test_the_learning_curve_chart_puts_points_curve_and_doubling_where_they_belong() -> None:
    chart = charts.learning_curve_chart(
        CURVE_RESULT["points"], CURVE_RESULT["fit"], CURVE_RESULT["doubling"]
    )
    left, width, top, height = 50, charts.PLOT_WIDTH + 40, 10, 220  # the chart's plot area
    seeds = [m for m in chart.marks if m["colour"] == charts.ORANGE]
    assert len(seeds) == 6 and {m["marker"] for m in seeds} == {"circle", "square"}
    # the model of 400 sentences (F1 0.7) sits half-way along an axis that ends at 800
    at_400 = [m for m in seeds if m["x"] == pytest.approx(left + width / 2)]
    assert len(at_400) == 2 and at_400[0]["y"] == pytest.approx(top + 0.3 * height)
    # the fitted curve: solid up to 400 sentences, dashed from there to 800
    solid, dashed = chart.paths
    assert not solid["dashed"] and dashed["dashed"]
    assert solid["d"].split(" L")[-1] == dashed["d"][1:].split(" L")[0]
    # the interval at 800 runs from 0.7 + 0.03 to 0.7 + 0.09
    (interval,) = [line for line in chart.lines if line["kind"] == "interval"]
    assert interval["x1"] == pytest.approx(left + width)
    ys = sorted((interval["y1"], interval["y2"]))
    assert ys == pytest.approx([top + (1 - 0.79) * height, top + (1 - 0.73) * height])
    assert len(chart.legend) == 5


def test_the_learning_curve_page_answers_first_and_escapes_file_names() -> None:
    from tagger.reports.page import learning_curve_page

    page = learning_curve_page(CURVE_RESULT)
    assert page.index("Doubling the annotation") < page.index('data-chart="learning-curve"')
    assert "train&lt;1&gt;.txt" in page and "&lt;DEF&gt;" in page and "<DEF>" not in page
    assert page.count("<tr><th>") == 1 + 6  # the header row, a row a model
    assert "http" not in page and "<script" not in page
    empty = learning_curve_page({**CURVE_RESULT, "points": [], "fit": None, "doubling": None})
    assert "No model was trained" in empty and 'data-chart="learning-curve"' not in empty


# --- the cross-validation page ----------------------------------------------------------------


def test_fold_spread_draws_mean_spread_and_each_tested_fold() -> None:
    from tagger.scoring.folds import summarise_folds

    def scores(f1: dict[str, float]) -> dict:
        return {
            "per_type": {t: {"f1": v, "gold": 2} for t, v in f1.items()},
            "micro": {"f1": sum(f1.values()) / len(f1), "gold": 2 * len(f1)},
        }

    summary = summarise_folds(
        [scores({"A": 0.5, "B": 0.8}), scores({"A": 0.7}), scores({"A": 0.9})]
    )
    chart = charts.fold_spread({**summary["per_type"], "all": summary["micro"]})
    bars = {rect["title"].split(":")[0]: rect for rect in chart.rects}
    assert bars["A"]["width"] == pytest.approx(0.7 * charts.PLOT_WIDTH)
    (spread_a, spread_all) = [line for line in chart.lines if line["kind"] == "spread"]
    # A: mean 0.7, sample sd 0.2 (values 0.5, 0.7, 0.9)
    assert (spread_a["x1"], spread_a["x2"]) == pytest.approx(
        (charts.LABEL_WIDTH + 0.5 * charts.PLOT_WIDTH, charts.LABEL_WIDTH + 0.9 * charts.PLOT_WIDTH)
    )
    # B was tested in one fold only: one dot, a mean, no spread line of its own
    assert len(chart.marks) == 3 + 1 + 3 and "sd" not in bars["B"]["title"]
    assert len(chart.legend) == 3


def test_the_cross_validation_page_lists_each_type_and_untested_folds_as_dashes() -> None:
    from tagger.reports.page import cross_validation_page

    entry = {"f1_per_fold": [0.5, None], "mean": 0.5, "sd": None, "min": 0.5, "max": 0.5, "gold": 3}
    result = {
        "training_file": "train.txt",
        "folds": 2,
        "sentences": 40,
        "documents": 4,
        "documents_kept_whole": True,
        "summary": {"per_type": {"<X>": entry}, "micro": entry, "warnings": ["type <X> ..."]},
        "notes": [],
    }
    page = cross_validation_page(result)
    assert '<tr><th>&lt;X&gt;</th><td class="n">0.500</td><td class="n">-</td>' in page
    assert "4 documents, each kept whole in one fold" in page and "<X>" not in page
    assert 'data-chart="folds"' in page and "<li>type &lt;X&gt; ...</li>" in page
