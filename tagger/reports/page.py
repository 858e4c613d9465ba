"""The evaluation page: one self-contained HTML file from `evaluate`'s results (and the run's
epochs when the model's run folder is at hand), rendered with Jinja2 (the `report` extra).

What it shows: the headline scores, each type's precision, recall and F1 (a table and bars),
where each type's spans ended up (the error breakdown of `tagger.scoring.metrics`), which type a
span with the right edges got instead, how dev scores went epoch by epoch, and the sentences
holding the most errors with gold and tagged spans boxed in them.
"""

from __future__ import annotations

import importlib.util
import json
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from tagger.data.io import decode_text, open_input
from tagger.errors import ConfigError, DataError
from tagger.reports.charts import (
    confusion_grid,
    fold_spread,
    learning_curve_chart,
    outcome_bars,
    score_bars,
    training_curve,
    type_colour,
)
from tagger.reports.page_templates import CHART_MACROS, CURVE_PAGE, FOLDS_PAGE, PAGE, STYLE
from tagger.version import package_version

PAGE_TITLE = "How the model did"
CURVE_TITLE = "Will more annotation pay?"
FOLDS_TITLE = "How good the model is, fold by fold"
EPOCHS_NAME = "epochs.json"  # the run folder's epochs, as training writes them beside the model


def require_report_extra() -> None:
    """ConfigError naming what to install when the templating library is missing."""
    if importlib.util.find_spec("jinja2") is None:
        raise ConfigError("writing the HTML page needs jinja2: pip install 'tagger[report]'")


def run_epochs(model: str | Path) -> tuple[list[dict[str, Any]] | None, str]:
    """The epochs of the run that wrote `model`, read from its run folder beside it, and a note
    saying why there are none (no such file, or one that does not hold epoch rows). A page
    without its training curve is still worth writing, so nothing here raises."""
    path = Path(model).parent / EPOCHS_NAME
    if not path.is_file():
        return None, (
            f"No {EPOCHS_NAME} beside the model, so no training curve: the model file was "
            "moved out of its run folder, or the folder was written by another release."
        )
    try:
        with open_input(path) as stream:
            rows = json.loads(decode_text(stream.read(), str(path)))
    except (DataError, ValueError) as error:
        return None, f"{path} could not be read ({error}), so no training curve."
    if not (
        isinstance(rows, list)
        and rows
        and all(isinstance(row, dict) and _is_epoch(row) for row in rows)
    ):
        return None, f"{path} holds no epoch rows with dev scores, so no training curve."
    return rows, ""


def _is_epoch(row: Mapping[str, Any]) -> bool:
    numbers = (int, float)
    return isinstance(row.get("epoch"), int) and all(
        isinstance(row.get(key), numbers) and not isinstance(row.get(key), bool)
        for key in ("dev_f1", "dev_precision", "dev_recall")
    )


def _template(name: str) -> Any:
    """One of the pages' templates, autoescaping everything put in it."""
    require_report_extra()
    import jinja2

    environment = jinja2.Environment(
        loader=jinja2.DictLoader(
            {
                "page": PAGE,
                "curve": CURVE_PAGE,
                "folds": FOLDS_PAGE,
                "charts": CHART_MACROS,
                "style": STYLE,
            }
        ),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
    )
    return environment.get_template(name)


def learning_curve_page(result: Mapping[str, Any]) -> str:
    """The page for a learning curve (the dict `tagger.training.learning_curve.learning_curve`
    writes): the one-sentence answer, the points with the fitted curve and what doubling is
    expected to give, each model, the warnings."""
    points = sorted(result["points"], key=lambda p: (p["fraction"], p["seed"]))
    return _template("curve").render(
        title=CURVE_TITLE,
        training_file=result["training_file"],
        training_sentences=f"{result['training_sentences']:,}",
        scored_file=result["scored_file"],
        answer=result["answer"],
        fit=result["fit"],
        curve_chart=(
            learning_curve_chart(points, result["fit"], result["doubling"]) if points else None
        ),
        points=points,
        warnings=result["warnings"],
        version=package_version(),
    )


def cross_validation_page(result: Mapping[str, Any]) -> str:
    """The page for a cross-validation (the dict `CrossValidation.to_dict` writes): span F1 of
    each type over the folds as a chart and a table, all spans pooled last, then the warnings."""
    summary = result["summary"]
    per_type = summary["per_type"]
    order = sorted(per_type, key=lambda t: (-per_type[t]["gold"], t))
    rows = {**{t: per_type[t] for t in order}, "all spans pooled": summary["micro"]}
    how = (
        f"{result['documents']:,} documents, each kept whole in one fold"
        if result["documents_kept_whole"]
        else "sentences dealt at random"
    )
    return _template("folds").render(
        title=FOLDS_TITLE,
        training_file=result["training_file"],
        sentences=f"{result['sentences']:,}",
        k=result["folds"],
        how=how,
        rows=rows,
        spread_chart=fold_spread(rows),
        warnings=[*result.get("notes", []), *summary["warnings"]],
        version=package_version(),
    )


def evaluation_page(
    result: Mapping[str, Any],
    history: Sequence[Mapping[str, Any]] | None = None,
    history_note: str = f"No {EPOCHS_NAME} was found beside the model.",
    history_name: str = EPOCHS_NAME,
) -> str:
    """The page for `tagger.apply.evaluate.evaluate_files`' result (its "worst" list, when
    present, shows the sentences); `history` is the run's epochs, or None with `history_note`
    saying why there are none."""
    overall = result["overall"]
    per_type = overall["per_type"]
    types = list(per_type)
    interval = overall.get("f1_interval")
    confusion = overall.get("type_confusion") or {}
    return _template("page").render(
        title=PAGE_TITLE,
        files=[entry["file"] for entry in result["files"]],
        sentences=f"{sum(entry['sentences'] for entry in result['files']):,}",
        scheme=result.get("input_scheme", ""),
        micro=overall["micro"],
        interval=(
            f"{interval['level']:.0%} interval {interval['low']:.3f} to {interval['high']:.3f}"
            if interval
            else ""
        ),
        per_type=per_type,
        score_chart=score_bars(per_type),
        outcome_chart=outcome_bars(overall["breakdown"]["per_type"]),
        confusion_chart=confusion_grid(types, confusion) if confusion else None,
        curve_chart=training_curve(history) if history else None,
        history_note=history_note,
        history_name=history_name,
        worst=[_boxed(sentence, types) for sentence in result.get("worst", [])],
        type_legend=[
            {"label": type_, "colour": type_colour(types, type_), "marker": "square"}
            for type_ in types
        ],
        version=package_version(),
    )


def _boxed(sentence: Mapping[str, Any], types: Sequence[str]) -> dict[str, Any]:
    """A worst-errors sentence as the page draws it: per side, runs of plain tokens and spans
    (with their type, colour, and whether the other side has the same span)."""
    gold = [tuple(span) for span in sentence["gold"]]
    tagged = [tuple(span) for span in sentence["tagged"]]
    return {
        "file": sentence["file"],
        "line": sentence["line"],
        "errors": sentence["errors"],
        "gold": _parts(sentence["tokens"], gold, set(tagged), types),
        "tagged": _parts(sentence["tokens"], tagged, set(gold), types),
    }


def _parts(
    tokens: Sequence[str], spans: Sequence[tuple], others: set[tuple], types: Sequence[str]
) -> list[dict[str, Any]]:
    starts = {start: (type_, start, end) for type_, start, end in spans}
    parts: list[dict[str, Any]] = []
    index = 0
    while index < len(tokens):
        span = starts.get(index)
        if span is None:
            parts.append({"text": tokens[index], "type": None})
            index += 1
            continue
        type_, start, end = span
        parts.append(
            {
                "text": " ".join(tokens[start:end]),
                "type": type_,
                "right": span in others,
                "colour": type_colour(types, type_) if type_ in types else "#000000",
            }
        )
        index = max(end, index + 1)
    return parts
