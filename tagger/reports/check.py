"""The `check` report as text: a block of labelled lines per file, then each later file against
the training file, then the verdict (`format_verdict`). Reads the dict of
`tagger.data.check.check_files`.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from tagger.data.file_scan import LONG_SENTENCE
from tagger.data.span_labelling import MAX_SEQUENCES, MAX_SPAN_TOKENS
from tagger.reports.layout import bullets, count, labelled, number, share


def format_check(report: dict[str, Any]) -> str:
    """A check report as readable text: one block per file, then the comparison with train."""
    out: list[str] = [report["note"] + "."]
    settings = report.get("tokenizer_settings", "its default settings")
    for entry in report["files"]:
        out.append("")
        out.extend(_format_file(entry, settings))
    if report["against_train"]:
        out.append("")
        out.append(f"Against the training file {report['train']}")
        train_misread = "tag_column_hint" in report["files"][0]
        for comparison, entry in zip(report["against_train"], report["files"][1:], strict=True):
            if train_misread or "tag_column_hint" in entry:
                # Words read as labels make every label "new": a long list that says nothing.
                out += ["", comparison["file"]]
                out += labelled("", "not compared: its labels or those of train are not span tags")
                continue
            out.extend(_format_comparison(comparison, entry))
    return "\n".join(out)


def _examples(found: dict[str, Any], describe: Callable[[dict[str, Any]], str]) -> list[str]:
    texts = [describe(example) for example in found["examples"]]
    return bullets(texts, hidden=found["count"] - len(found["examples"]))


def _counted_values(counts: dict[str, int]) -> str:
    return ", ".join(f"{name}={number(n)}" for name, n in counts.items())


def _format_file(entry: dict[str, Any], tokenizer_settings: str) -> list[str]:
    out = [entry["file"]]
    size = (
        f"{count(entry['sentences'], 'sentence')}, {count(entry['tokens'], 'token')}, "
        f"{count(entry['documents'], 'document')}"
    )
    if entry["columns"]:
        size += f"; {count(entry['columns'], 'column')}, {entry['delimiter']}-separated"
    out += labelled("size", size)
    if "tag_column_hint" in entry:
        # The rest of the report would describe words as labels: say which column to read.
        return out + labelled("columns", _tag_column_advice(entry))
    longest = entry["longest_sentence"]
    if longest["line"] is not None:
        out += labelled(
            "longest", f"{count(longest['tokens'], 'token')}, from line {longest['line']}"
        )
    found = entry["too_long"]
    if found["count"]:
        out += labelled(
            "too long",
            f"{count(found['count'], 'sentence')} of more than {count(found['limit'], 'token')}, "
            f"which train and evaluate refuse ({found['key']}); sentences end at blank lines:",
        )
        out += _examples(found, lambda e: f"line {e['line']}: {count(e['tokens'], 'token')}")
    if entry["whitespace_only_lines"]:
        out += labelled(
            "blank lines",
            f"{count(entry['whitespace_only_lines'], 'line')} holding only spaces or TABs, "
            "taken as empty lines",
        )
    if entry["trailing_lines"]:
        out += labelled(
            "after end",
            f"{count(entry['trailing_lines'], 'line')} of document marks, comments or blanks "
            "after the last sentence, which belong to no sentence",
        )
    if "scheme" in entry:
        out += _format_labels(entry)
    for column in entry["extra_columns"]:
        shown = _counted_values({v["value"]: v["count"] for v in column["most_frequent"]})
        more = column["distinct"] - len(column["most_frequent"])
        out += labelled(
            f"column {column['column']}",
            f"{count(column['distinct'], 'distinct value')}: {shown}"
            + (f", and {number(more)} more" if more > 0 else ""),
        )
    for coverage in entry.get("lexicon_coverage", []):
        out += _format_coverage(coverage)
    if "tokenizer_fit" in entry:
        out += _format_tokenizer_fit(entry["tokenizer_fit"], tokenizer_settings)
    found = entry["invisible_characters"]
    if found["count"]:
        out += labelled(
            "hidden chars",
            f"{count(found['count'], 'token')} holding invisible, control or unusual space "
            "characters:",
        )
        out += _examples(
            found, lambda e: f"line {e['line']}: {e['token']}, {', '.join(e['characters'])}"
        )
    repeated = entry["repeated_sentences"]
    verb = "repeats" if repeated == 1 else "repeat"
    out += labelled("repeats", f"{count(repeated, 'sentence')} {verb} an earlier one of this file")
    return out


def _tag_column_advice(entry: dict[str, Any]) -> str:
    """Which column holds the tags when the label column does not, and the options to read it."""
    hint = entry["tag_column_hint"]
    tag_columns = hint["tag_columns"]
    examples = entry["not_span_tags"]["examples"]
    example = f" (e.g. {examples[0]['label']!r} on line {examples[0]['line']})" if examples else ""
    if len(tag_columns) == 1:
        where = f"column {tag_columns[0]} holds"
    else:
        where = f"columns {', '.join(map(str, tag_columns[:-1]))} and {tag_columns[-1]} hold"
    options = " or ".join(f"--label-column {column}" for column in tag_columns)
    if hint["tokens_from"] is not None:
        options += f" --token-column {hint['tokens_from']}"
    elif hint["token_column"] in tag_columns:
        options += " and the column of the tokens with --token-column"
    return (
        f"the labels (column {hint['label_column']}) are not span tags{example}, but {where} "
        f"only span tags: read the file with {options} (check, train, evaluate, score and convert all take "
        "these options)"
    )


def _format_labels(entry: dict[str, Any]) -> list[str]:
    out: list[str] = []
    scheme = entry["scheme"]
    if scheme is not None:
        if scheme["checked_as"] is None:
            out += labelled("scheme", f"unknown: {scheme['note']}")
        else:
            names = " or ".join(scheme["candidates"])
            if scheme["ambiguous"]:
                names += f" (several fit equally well; checked as {scheme['checked_as']})"
            out += labelled("scheme", f"{names}: {scheme['note']}")
    types = _counted_values(entry["span_types"])
    out += labelled("spans", number(entry["spans"]) + (f": {types}" if types else ""))
    labels = _counted_values(entry["labels"])
    if entry["labels_not_shown"]:
        labels += f", and {number(entry['labels_not_shown'])} rarer ones"
    out += labelled(
        "labels", f"{number(entry['distinct_labels'])} distinct: {labels}" if labels else "none"
    )
    found = entry["not_span_tags"]
    if found["count"]:
        out += labelled(
            "not tags",
            f"{count(found['count'], 'sentence')} with labels that are neither O nor PREFIX-TYPE:",
        )
        out += _examples(found, lambda e: f"line {e['line']}: {e['label']!r}")
    found = entry["ill_formed"]
    if found is not None:
        if found["count"]:
            out += labelled("ill-formed", f"{count(found['count'], 'transition')}:")
            out += _examples(found, lambda e: f"line {e['line']}: {e['message']}")
        else:
            out += labelled("ill-formed", "none")
    found = entry["inconsistent_labelling"]
    if found["count"]:
        out += labelled(
            "conflicts",
            f"{count(found['count'], 'token sequence')} labelled in more than one way:",
        )
        out += _examples(found, _describe_conflict)
    out += _format_span_labelling(entry["span_labelling"])
    for typo in entry["likely_typos"]:
        out += labelled("typo?", _describe_typo(typo))
    return out


def _format_span_labelling(found: dict[str, Any]) -> list[str]:
    out: list[str] = []
    differ = found["types_differ"]
    if differ["count"]:
        out += labelled(
            "types differ",
            f"{count(differ['count'], 'token sequence')} labelled as spans of different types "
            "(most disagreeing first):",
        )
        out += _examples(differ, _describe_labellings)
    either = found["span_or_not"]
    if either["count"]:
        out += labelled(
            "span or not",
            f"{count(either['count'], 'token sequence')} labelled as a span in one place and "
            "lying outside every span in another (most disagreeing first):",
        )
        out += _examples(either, _describe_labellings)
    if found["not_followed"]:
        out += labelled(
            "",
            f"(not compared: {count(found['not_followed'], 'span')} longer than "
            f"{MAX_SPAN_TOKENS} tokens or past the first {number(MAX_SEQUENCES)} sequences)",
        )
    return out


def _describe_labellings(example: dict[str, Any]) -> str:
    parts = [
        f"{kind} {_times(seen['count'])} (line {seen['line']})"
        for kind, seen in example["types"].items()
    ]
    outside = example["outside"]
    if outside["count"]:
        parts.append(f"outside spans {_times(outside['count'])} (line {outside['line']})")
    return f"{example['text']!r}: " + ", ".join(parts)


def _times(n: int) -> str:
    return "once" if n == 1 else f"{number(n)} times"


def _describe_typo(typo: dict[str, Any]) -> str:
    lines = ", ".join(str(line) for line in typo["lines"])
    what = "type" if typo["kind"] == "type" else "label"
    unit = "token" if typo["kind"] == "type" else "time"
    return (
        f"{what} {typo['name']!r} seen {count(typo['count'], unit)} (line {lines}), close to "
        f"{typo['near']!r} seen {count(typo['near_count'], unit)} ({typo['how']})"
    )


def tokenizer_fit_finding(fit: dict[str, Any], settings: str) -> str:
    """The tokenizer finding in one sentence (`check` lists examples under it; `train` shows it
    in its header): how many annotated tokens the tagging tokenizer with `settings` would not
    give back whole, and the most frequent of them."""
    split, lost, tokens = fit["split"], fit["lost"], fit["tokens"]
    differ = split["count"] + lost["count"]
    tokenizer = f"the tagging tokenizer (with {settings})"
    if not differ:
        return f"all {count(tokens, 'annotated token')} come back whole from {tokenizer}"
    text = (
        f"{number(differ)} of {count(tokens, 'annotated token')} ({share(differ, tokens)}) "
        f"would not come back whole from {tokenizer}: {number(split['count'])} cut into "
        f"pieces, {number(lost['count'])} not read as a token at all"
    )
    common = [
        f"{form['token']!r} -> {_pieces(form['pieces'])} ({_times(form['count'])})"
        for form in fit["most_frequent"]
    ]
    return text + "; most often " + ", ".join(common)


def _format_tokenizer_fit(fit: dict[str, Any], settings: str) -> list[str]:
    if not fit["split"]["count"] + fit["lost"]["count"]:
        return labelled("tokenizer", tokenizer_fit_finding(fit, settings))
    split, lost = fit["split"], fit["lost"]
    out = labelled("tokenizer", tokenizer_fit_finding(fit, settings) + ":")
    for found in (split, lost):
        out += _examples(
            found, lambda e: f"line {e['line']}: {e['token']!r} -> {_pieces(e['pieces'])}"
        )
    return out


def _pieces(pieces: list[str]) -> str:
    return " ".join(repr(piece) for piece in pieces) if pieces else "nothing"


def _format_coverage(coverage: dict[str, Any]) -> list[str]:
    spans, entries, matches = coverage["spans"], coverage["entries"], coverage["matches"]
    text = (
        f"{coverage['lexicon']} ({count(entries, 'entry', 'entries')}) covers "
        f"{number(coverage['exact'])} of {count(spans, 'gold span')} exactly "
        f"({share(coverage['exact'], spans)}; {number(coverage['exact_same_type'])} with the "
        f"same type), {number(coverage['partial'])} in part, {number(coverage['none'])} not at "
        f"all; {number(coverage['matches_outside_spans'])} of its "
        f"{count(matches, 'match', 'matches')} lie outside every gold span"
    )
    out = labelled("lexicon", text)
    by_type = "; ".join(
        f"{kind} {number(t['exact'])} of {number(t['spans'])} exactly, "
        f"{number(t['partial'])} in part"
        for kind, t in coverage["per_type"].items()
    )
    if by_type:
        out += labelled("", f"by type: {by_type}")
    return out


def _describe_conflict(example: dict[str, Any]) -> str:
    first, later = example["lines"]
    text = f"lines {first} and {later}: {example['text']!r}"
    difference = example.get("first_difference")
    if difference:
        a, b = difference["labels"]
        text += f", token {difference['position']} {difference['token']!r} is {a}, then {b}"
    return text


def _format_comparison(comparison: dict[str, Any], entry: dict[str, Any]) -> list[str]:
    out = ["", comparison["file"]]
    for key, title in (
        ("span_types_not_in_train", "new types"),
        ("labels_not_in_train", "new labels"),
        ("train_labels_absent_here", "train only"),
    ):
        items = comparison[key]
        out += labelled(title, ", ".join(items) if items else "none")
    shared = comparison["sentences_also_in_train"]
    longer = comparison["longer_sentences_also_in_train"]
    text = f"{number(shared)} of {number(comparison['sentences'])} sentences also occur in train"
    if shared:
        text += f" ({number(longer)} of them with {LONG_SENTENCE} tokens or more):"
    out += labelled("overlap", text)
    out += _examples(
        entry["also_in_train"],
        lambda e: f"line {e['line']} (train line {e['train_line']}): {e['text']!r}",
    )
    return out


def format_verdict(report: dict[str, Any], exit_code: int, relaxed_by: str = "") -> str:
    """The last lines of a check: whether the data passed, why, and the exit code that follows.

    `relaxed_by` names the option that turns a failure into a report only, when it was given.
    """
    problems = report["problems"]
    if not problems:
        text = "passed: no ill-formed tags"
        if report["against_train"]:
            text += f", no dev/test sentence of {LONG_SENTENCE} tokens or more also in train"
        return "\n".join(labelled("result", f"{text} (exit code {exit_code})"))
    found = "; ".join(_describe_problem(problem) for problem in problems)
    if relaxed_by:
        head = f"would fail, but {relaxed_by} is given (exit code {exit_code})"
    else:
        head = f"failed (exit code {exit_code})"
    return "\n".join(labelled("result", f"{head}: {found}"))


def _describe_problem(problem: dict[str, Any]) -> str:
    n, name = problem["count"], problem["file"]
    if problem["finding"] == "no_sentences":
        return f"{name} holds no sentences"
    if problem["finding"] == "ill_formed":
        return f"{count(n, 'ill-formed transition')} in {name}"
    if problem["finding"] == "not_span_tags":
        return f"{count(n, 'sentence')} of {name} with labels that are not span tags"
    return (
        f"{count(n, 'sentence')} of {name} ({LONG_SENTENCE} tokens or more) also in the training "
        "file"
    )
