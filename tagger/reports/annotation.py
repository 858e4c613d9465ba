"""The reports of the annotation loop: the sentences `pick` chose, and `cross-validate`'s span F1
per type over its folds.

Both read plain dicts (a pick's rows, the dict `CrossValidation.to_dict` writes), so a stored
cross-validation prints the same as a fresh one.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from tagger.reports.layout import Cell, Column, count, labelled, percent, render_table

PREVIEW = 48  # characters of a picked sentence shown in the table


def format_picks(picks: Sequence[dict[str, Any]], summary: dict[str, Any]) -> str:
    """The picked sentences, most uncertain first: rank, score, length, where each lies, and its
    opening words; then how many the pool held and what was passed over.

    ``picks`` rows: rank, score, tokens (list), document, at ([start, end]);
    ``summary``: pool (sentences), passed_over, measure, length_norm, out, warnings."""
    columns = (
        Column("rank"),
        Column("uncertainty"),
        Column("tokens"),
        Column("document", "left"),
        Column("characters", "left"),
        Column("sentence", "left"),
    )
    rows: list[list[Cell]] = []
    for pick in picks:
        text = " ".join(pick["tokens"])
        preview = text if len(text) <= PREVIEW else text[: PREVIEW - 3] + "..."
        start, end = pick["at"]
        rows.append(
            [pick["rank"], f"{pick['score']:.4f}", len(pick["tokens"]), str(pick["document"]),
             f"{start}-{end}", preview]
        )  # fmt: skip
    lines = [
        f"Picked {count(len(picks), 'sentence')} of {count(summary['pool'], 'pool sentence')} "
        f"to annotate next, by {summary['measure']} (length: {summary['length_norm']}):",
        "",
        *render_table(columns, rows),
        "",
        *labelled(
            "passed over",
            f"{count(summary['passed_over'], 'sentence')} too alike to one picked before "
            f"(character 4-gram similarity of {summary['threshold']} or more)",
        ),
        *labelled("written", f"{summary['out']}, pre-filled with the model's labels"),
    ]
    for warning in summary["warnings"]:
        lines += labelled("warning", warning)
    return "\n".join(lines) + "\n"


def _f1(value: float | None) -> str:
    return "-" if value is None else percent(value)


def format_cross_validation(result: dict[str, Any]) -> str:
    """Span F1 per type over the folds: mean, standard deviation, range, each fold's F1 and the
    gold spans; all spans pooled under the rule; then the notes and warnings."""
    summary = result["summary"]
    k = result["folds"]
    columns = (
        Column("span type", "left"),
        Column("F1 mean %"),
        Column("sd"),
        Column("lowest"),
        Column("highest"),
        *(Column(f"fold {n}") for n in range(1, k + 1)),
        Column("in gold"),
    )

    def row(name: str, entry: dict[str, Any]) -> list[Cell]:
        return [
            name,
            _f1(entry["mean"]),
            _f1(entry["sd"]),
            _f1(entry["min"]),
            _f1(entry["max"]),
            *(_f1(v) for v in entry["f1_per_fold"]),
            entry["gold"],
        ]

    per_type = summary["per_type"]
    order = sorted(per_type, key=lambda t: (-per_type[t]["gold"], t))
    how = (
        f"{count(result['documents'], 'document')} each kept whole in one fold"
        if result["documents_kept_whole"]
        else "sentences dealt at random (no -DOCSTART- documents)"
    )
    lines = [
        f"{k}-fold cross-validation of {result['training_file']}: "
        f"{count(result['sentences'], 'sentence')}, {how}",
        "Span F1 of each fold's model on the fold it did not train on:",
        "",
        *render_table(
            columns,
            [row(t, per_type[t]) for t in order],
            [row("all spans pooled", summary["micro"])],
        ),
        "",
        *labelled(
            "folds",
            "; ".join(
                f"{f['fold']}: trained on {f['trained_on']:,}, held out {f['held_out']:,}, "
                f"best epoch {f['best_epoch']}"
                for f in result["per_fold"]
            ),
        ),
    ]
    for note in result.get("notes", []):
        lines += labelled("note", note)
    for warning in summary["warnings"]:
        lines += labelled("warning", warning)
    return "\n".join(lines) + "\n"


def format_learning_curve(result: dict[str, Any]) -> str:
    """Span F1 of each model by its share of the training sentences (one column a seed), the
    curve's parameters, the one-sentence answer, then the warnings; ``result`` is the dict
    `tagger.training.learning_curve.learning_curve` writes."""
    points = result["points"]
    seeds = sorted({p["seed"] for p in points})
    columns = (
        Column("share of train"),
        Column("sentences"),
        *(Column(f"F1 % seed {seed}") for seed in seeds),
        Column("curve %"),
    )
    fit = result["fit"]
    rows: list[list[Cell]] = []
    for fraction in sorted({p["fraction"] for p in points}):
        here = {p["seed"]: p for p in points if p["fraction"] == fraction}
        size = max(p["sentences"] for p in here.values())
        curve = fit["a"] - fit["b"] * size ** -fit["c"] if fit else None
        rows.append(
            [
                f"{fraction:.0%}",
                size,
                *(_f1(here[s]["f1"]) if s in here else "-" for s in seeds),
                "-" if curve is None else _f1(curve),
            ]
        )
    lines = [
        f"Learning curve of {result['training_file']} "
        f"({count(result['training_sentences'], 'sentence')}), each model scored on "
        f"{result['scored_file']}:",
        "",
        *render_table(columns, rows),
        "",
    ]
    if fit:
        lines += labelled(
            "curve",
            f"F1(n) = {100 * fit['a']:.1f} - {100 * fit['b']:.3g} * n^-{fit['c']:.3f} "
            "(in points, n the training sentences)",
        )
    lines += labelled("answer", result["answer"])
    for warning in result["warnings"]:
        lines += labelled("warning", warning)
    return "\n".join(lines) + "\n"
