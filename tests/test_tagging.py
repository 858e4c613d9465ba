from __future__ import annotations

import itertools
import json
import os
import random
import subprocess
import sys
from pathlib import Path

import pytest
import torch
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from model_files import tiny_training_config
from typer.testing import CliRunner

from tagger import Tagger
from tagger.apply.documents import detect_input_format
from tagger.apply.evaluate import evaluate_files
from tagger.apply.review import least_certain
from tagger.apply.tagger import limit_kernel_cache
from tagger.apply.tagging import TagOptions, tag_files
from tagger.cli import app
from tagger.config import Config
from tagger.data.corpus import read_sentences
from tagger.data.schemes import (
    SCHEME_NAMES,
    convert_tags,
    labels_for_types,
    spans_to_tags,
    tags_to_spans,
)
from tagger.network.batching import collate
from tagger.network.modelfile import load_model_file
from tagger.reports.notes import CAUTION
from tagger.scoring.files import score_files
from tagger.text.sentences import split_sentences
from tagger.text.tokenizer import TokenizerSettings
from tagger.text.vocab import Vocab, Vocabularies
from tagger.training.loop import train

runner = CliRunner()

COMPONENTS = ["pitch bearing", "yaw drive", "gearbox", "main shaft", "brake pad", "blade root"]
ASSETS = ["T-14", "T-3", "T-9", "T-21", "WTG 07"]
READINGS = ["7.2 mm/s", "12 bar", "1,450 rpm", "3.1 mm/s"]
TEMPLATES = [
    "Crew {crew} replaced the {COMPONENT} on {ASSET} .",
    "{COMPONENT} vibration hit {READING} at {ASSET} .",
    "No fault found on {ASSET} .",
    "Checked the {COMPONENT} ; reading was {READING} .",
    "{ASSET} stopped after the {COMPONENT} failed .",
]


# Names never seen in training, for files the model should get partly wrong.
UNSEEN = {
    "COMPONENT": ["tail vane", "slip ring"],
    "ASSET": ["Q-88", "North 2"],
    "READING": ["9 kN"],
}


def _sentences(seed: int, count: int, unseen: bool = False) -> list[list[tuple[str, str]]]:
    """Invented service-report sentences as (token, IOB2 label) pairs."""
    rng = random.Random(seed)
    pools = {"COMPONENT": COMPONENTS, "ASSET": ASSETS, "READING": READINGS}
    if unseen:
        pools = {kind: names + UNSEEN[kind] for kind, names in pools.items()}
    out = []
    for _ in range(count):
        rows: list[tuple[str, str]] = []
        for piece in rng.choice(TEMPLATES).split():
            if piece == "{crew}":
                rows.append((rng.choice("ABCD"), "O"))
            elif piece.startswith("{"):
                kind = piece[1:-1]
                words = rng.choice(pools[kind]).split()
                rows.extend((w, ("B-" if i == 0 else "I-") + kind) for i, w in enumerate(words))
            else:
                rows.append((piece, "O"))
        out.append(rows)
    return out


def _write_columns(path: Path, sentences: list[list[tuple[str, str]]]) -> Path:
    path.write_text("".join("".join(f"{t}\t{label}\n" for t, label in s) + "\n" for s in sentences))
    return path


def _detokenised(sentence: list[tuple[str, str]]) -> str:
    return " ".join(t for t, _ in sentence).replace(" .", ".").replace(" ;", ";")


@pytest.fixture(scope="module")
def model(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A tiny CRF tagger trained once for this module (a few seconds)."""
    folder = tmp_path_factory.mktemp("model")
    data = _write_columns(folder / "train.txt", _sentences(1, 60))
    config = tiny_training_config(data, data, epochs=6, batch_size=8, learning_rate=0.02)
    return train(config, folder / "run").model_path


@pytest.fixture(scope="module")
def documents() -> list[str]:
    """Raw texts of several sentences each, some empty."""
    sentences = [_detokenised(s) for s in _sentences(7, 40)]
    docs = [" ".join(sentences[i : i + 3]) for i in range(0, 36, 3)]
    return [*docs[:4], "", *docs[4:8], "   \n", *docs[8:]]


def _jsonl(path: Path, texts: list[str], **extra: object) -> Path:
    lines = [json.dumps({"id": f"doc{i}", "text": t, **extra}) for i, t in enumerate(texts)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _tag(*args: str, input: str | bytes | None = None):  # noqa: A002 - CliRunner's name
    return runner.invoke(app, ["tag", *args], input=input)


def _records(text: str) -> list[dict]:
    return [json.loads(line) for line in text.splitlines()]


# ---------------------------------------------------------------------------------------------
# Agreement with evaluation, offsets, order


def test_tagged_column_file_scores_like_evaluate(model: Path, tmp_path: Path) -> None:
    gold = _write_columns(tmp_path / "gold.txt", _sentences(3, 50, unseen=True))
    out = tmp_path / "pred.txt"
    result = _tag(str(model), str(gold), "--input-format", "columns", "--output-format",
                  "columns", "--out", str(out))  # fmt: skip
    assert result.exit_code == 0, result.stderr
    # The output keeps the gold column and appends the prediction as the last column.
    assert [s.tokens for s in read_sentences(out)] == [s.tokens for s in read_sentences(gold)]
    scored = score_files(gold, out)
    evaluated = evaluate_files(Tagger.load(model), [gold])["overall"]
    assert scored["micro"] == evaluated["micro"]
    assert scored["per_type"] == evaluated["per_type"]
    assert 0.3 < scored["micro"]["f1"] < 1.0  # unseen names: a comparison with errors in it


def test_columns_output_in_another_scheme_holds_the_same_spans(model: Path, tmp_path: Path) -> None:
    gold = _write_columns(tmp_path / "gold.conll", _sentences(4, 20))  # .conll: columns
    plain = _tag(str(model), str(gold), "--output-format", "columns")
    bioes = _tag(str(model), str(gold), "--output-format", "columns", "--scheme", "BIOES")
    assert plain.exit_code == bioes.exit_code == 0
    rows = [line.split("\t") for line in plain.stdout.splitlines() if line]
    rows_bioes = [line.split("\t") for line in bioes.stdout.splitlines() if line]
    assert [r[:2] for r in rows] == [r[:2] for r in rows_bioes]
    # schemes.convert_tags is the reference conversion between schemes.
    assert convert_tags([r[2] for r in rows], "IOB2", "BIOES") == [r[2] for r in rows_bioes]


def test_api_gives_the_mentions_the_command_writes(
    model: Path, documents: list[str], tmp_path: Path
) -> None:
    result = _tag(str(model), str(_jsonl(tmp_path / "docs.jsonl", documents)))
    assert result.exit_code == 0, result.stderr
    written = [r["mentions"] for r in _records(result.stdout)]
    found = Tagger.load(model).tag(documents)
    assert [[m.to_record() for m in mentions] for mentions in found] == written
    assert any(written), "the model should find some mentions in these texts"
    first = next(m for mentions in found for m in mentions)
    assert list(first.to_record()) == ["type", "at", "quote", "confidence"]
    assert first.to_record()["at"] == [first.start, first.end]


_PIECES = ["T-14", "gearbox", "pitch", "bearing", "7.2", "mm/s", "on", "the", "WTG", "07", "Crew",
           ".", ",", ";", " ", " ", "\n", "\n\n", "\t", "\r\n", "é", "\u200b", "—", "🙂", "e.g.",
           "ÅÄÖ", "x", "'s"]  # fmt: skip


@settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    st.lists(
        st.one_of(
            st.text(max_size=60), st.lists(st.sampled_from(_PIECES), max_size=40).map("".join)
        ),
        min_size=1,
        max_size=4,
    )
)
def test_every_mention_points_at_its_quote(model: Path, texts: list[str]) -> None:
    tagger = _api(model)
    for text, mentions in zip(texts, tagger.tag(texts), strict=True):
        previous_end = 0
        for mention in mentions:
            assert mention.quote == text[mention.start : mention.end]
            assert previous_end <= mention.start < mention.end <= len(text)
            assert 0.0 <= mention.confidence <= 1.0
            previous_end = mention.end


_LOADED: dict[Path, object] = {}


def _api(model: Path):  # one loaded tagger for every hypothesis example
    if model not in _LOADED:
        _LOADED[model] = Tagger.load(model)
    return _LOADED[model]


def test_jsonl_offsets_and_text_from_the_command(model: Path, tmp_path: Path) -> None:
    text = "Crew B replaced the pitch\nbearing on T-14.\r\n\r\nNo fault found on WTG 07 — ok 🙂."
    path = tmp_path / "one.txt"
    path.write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))  # the byte-order mark is not text
    result = _tag(str(model), str(path))
    assert result.exit_code == 0, result.stderr
    (record,) = _records(result.stdout)
    assert record["text"] == text and record["id"] == str(path)
    assert record["mentions"]
    for mention in record["mentions"]:
        start, end = mention["at"]
        assert text[start:end] == mention["quote"]


def test_two_workers_keep_input_order(model: Path, documents: list[str], tmp_path: Path) -> None:
    many = [d for _ in range(4) for d in documents]
    source = _jsonl(tmp_path / "docs.jsonl", many)
    one = _tag(str(model), str(source), "--chunk-chars", "300")
    two = _tag(str(model), str(source), "--chunk-chars", "300", "--workers", "2")
    assert one.exit_code == 0 and two.exit_code == 0, two.stderr
    ids = [r["id"] for r in _records(two.stdout)]
    assert ids == [f"doc{i}" for i in range(len(many))]
    # 300-character chunks hold one to three documents: many chunks went through the pool.
    assert len(many) > 30
    assert two.stdout == one.stdout


# ---------------------------------------------------------------------------------------------
# Scores, review flag, filtering


def test_span_scores_are_brute_force_marginals(model: Path) -> None:
    tagger = Tagger.load(model)
    tokens = ["gearbox", "on", "T-14", "."]
    net, labels = tagger.net, tagger.vocabs.labels.itos
    batch = tagger.encode([tokens])[0]
    with torch.no_grad():
        emissions = net.emissions(
            torch.tensor([batch.words]), _chars(batch.chars), torch.tensor([len(tokens)])
        )
        # Brute force (reference): score every label path with the CRF's own path score.
        paths = torch.tensor(list(itertools.product(range(len(labels)), repeat=len(tokens))))
        mask = torch.ones(paths.shape, dtype=torch.bool)
        scores = net.crf.score(emissions.expand(len(paths), -1, -1), paths, mask)
    best = paths[scores.argmax()].tolist()
    # Training fitted a temperature on dev; the network's own probabilities are temperature 1.
    assert tagger.temperature != 1.0
    for temperature in (1.0, tagger.temperature, 2.5):
        # At temperature T every path's score is divided by T (tagger.apply.predict).
        probability = torch.softmax(scores / temperature, 0)  # (paths,)
        marginal = [
            {j: float(probability[paths[:, t] == j].sum()) for j in range(len(labels))}
            for t in range(len(tokens))
        ]
        expected = [
            (kind, start, end, min(marginal[t][best[t]] for t in range(start, end)))
            for kind, start, end in tags_to_spans([labels[j] for j in best], tagger.scheme)
        ]
        given = None if temperature == tagger.temperature else temperature
        (sentence,) = tagger.predict_sentences([tokens], temperature=given)
        assert [s[:3] for s in sentence.spans] == [s[:3] for s in expected]
        assert expected, "the sentence should hold at least one span"
        for got, want in zip(sentence.spans, expected, strict=True):
            assert got[3] == pytest.approx(want[3], abs=1e-4)
        # The certainty reads every token, those outside spans too.
        least = min(marginal[t][best[t]] for t in range(len(tokens)))
        assert sentence.certainty == pytest.approx(least, abs=1e-4)
        assert sentence.certainty <= min(s[3] for s in sentence.spans)
    assert tagger.predict_scored_spans([tokens]) == [tagger.predict_sentences([tokens])[0].spans]


def test_a_sentence_scores_the_same_alone_and_beside_longer_ones(model: Path) -> None:
    # In a batch the shorter sentences are padded, and the probabilities are 0 at padding: the
    # certainty and the span scores must read the real tokens only.
    tagger = Tagger.load(model)
    sentences = [
        _detokenised(s).replace(".", " .").replace(";", " ;").split()
        for s in _sentences(7, 12, unseen=True)
    ]
    sentences.append(["T-14"])
    assert len({len(s) for s in sentences}) > 3
    together = tagger.predict_sentences(sentences, batch_size=len(sentences))
    alone = [tagger.predict_sentences([s])[0] for s in sentences]
    for a, b in zip(together, alone, strict=True):
        assert [s[:3] for s in a.spans] == [s[:3] for s in b.spans]
        assert [s[3] for s in a.spans] == pytest.approx([s[3] for s in b.spans], abs=1e-6)
        assert a.certainty == pytest.approx(b.certainty, abs=1e-6)
        assert 0 < a.certainty <= min([1.0, *(s[3] for s in a.spans)])
    assert min(a.certainty for a in together) < 0.99  # unseen names leave the model unsure


@settings(max_examples=300, deadline=None)
@given(st.sampled_from(SCHEME_NAMES), st.data())
def test_label_paths_read_as_tags_to_spans_reads_them(scheme: str, data: st.DataObject) -> None:
    labels = labels_for_types(["A", "B"], scheme)
    vocabs = Vocabularies(Vocab([]), Vocab([]), Vocab(labels, specials=False), False, False)
    reader = Tagger(None, vocabs, Config(), scheme)  # type: ignore[arg-type] # no network needed
    length = data.draw(st.integers(0, 10))
    if data.draw(st.booleans()):  # any label sequence, mostly ill-formed
        path = data.draw(
            st.lists(st.integers(0, len(labels) - 1), min_size=length, max_size=length)
        )
    else:  # a well-formed one, written from random non-overlapping spans
        cuts = sorted(data.draw(st.sets(st.integers(0, length), max_size=6)))
        spans = [
            (data.draw(st.sampled_from("AB")), a, b)
            for a, b in zip(cuts, cuts[1:], strict=False)
            if a < b
        ]
        spans = [s for k, s in enumerate(spans) if k % 2 == 0 or scheme != "IO"]
        tags = spans_to_tags(spans, length, scheme)
        path = [labels.index(t) for t in tags]
    # schemes.tags_to_spans is the reference reading.
    assert reader.label_ids_to_spans(path) == tags_to_spans([labels[j] for j in path], scheme)


def test_predicted_spans_equal_decoding_the_training_forward_pass(model: Path) -> None:
    # Prediction looks up character features per distinct token; training runs TaggerNet.emissions
    # on padded batches. Both must find the same spans.
    tagger = Tagger.load(model)
    token_lists = [[t for t, _ in s] for s in _sentences(11, 80, unseen=True)]
    token_lists += [["x" * 40, "T-14"], ["Ünseen", "gearbox", "🙂"]]
    encoded = tagger.encode(token_lists)
    expected = []
    with torch.no_grad():
        for i in range(len(token_lists)):
            batch = collate(encoded, [i])
            emissions = tagger.net.emissions(batch.words, batch.chars, batch.lengths)
            (path,) = tagger.net.decode(emissions, batch.mask)
            expected.append(
                tags_to_spans([tagger.vocabs.labels.itos[j] for j in path], tagger.scheme)
            )
    assert tagger.predict_spans(token_lists, batch_size=16) == expected
    scored = tagger.predict_scored_spans(token_lists, batch_size=16)
    assert [[s[:3] for s in spans] for spans in scored] == expected


def test_cached_encoding_equals_encoding(model: Path) -> None:
    tagger = Tagger.load(model)
    token_lists = [["gearbox", "on", "T-14", "."], ["unseen-word", "gearbox", "x" * 40], []]
    for _ in range(2):  # the second pass reads the cache
        assert tagger.encode_cached(token_lists) == tagger.encode(token_lists)


def _chars(chars: list[list[int]]) -> torch.Tensor:
    width = max(len(c) for c in chars)
    return torch.tensor([[c + [0] * (width - len(c)) for c in chars]])


def test_min_score_drops_low_mentions_and_review_flags_documents(
    model: Path, documents: list[str], tmp_path: Path
) -> None:
    source = _jsonl(tmp_path / "docs.jsonl", documents)
    tagger = Tagger.load(model)
    found = tagger.tag(documents)
    scores = sorted(m.confidence for mentions in found for m in mentions)
    cut = scores[len(scores) // 2]  # the median: some spans on each side
    # A document's certainty: the lowest probability of a chosen label over all of its tokens.
    certainty = [
        least_certain(
            tagger.predict_sentences([[t.text for t in s.tokens] for s in tagger.tokenize(d)])
        )
        for d in documents
    ]
    review_cut = sorted(certainty)[len(certainty) // 2]  # the median: documents on each side
    everything = _records(_tag(str(model), str(source), "--review-below", str(review_cut)).stdout)
    filtered = _records(_tag(str(model), str(source), "--min-score", str(cut)).stdout)
    for mentions, full, kept, sure in zip(found, everything, filtered, certainty, strict=True):
        assert [m["at"][0] for m in kept["mentions"]] == [
            m.start for m in mentions if m.confidence >= cut
        ]
        assert len(full["mentions"]) == len(mentions)
        assert full["needs_review"] == (sure < review_cut)
        # every mention below the threshold flags its document: the flag reads all tokens
        assert full["needs_review"] or not any(m.confidence < review_cut for m in mentions)
    flags = [r["needs_review"] for r in everything]
    assert any(flags) and not all(flags)
    table = _tag(str(model), str(source), "--min-score", str(cut), "--output-format", "table")
    rows = table.stdout.splitlines()
    assert rows[0].split("\t") == ["document", "from", "to", "type", "confidence", "quote"]
    assert len(rows) - 1 == sum(len(r["mentions"]) for r in filtered)
    written = [m for r in filtered for m in r["mentions"]]
    assert [row.split("\t")[1:4] for row in rows[1:]] == [
        [str(m["at"][0]), str(m["at"][1]), m["type"]] for m in written
    ]


def test_table_escapes_tabs_and_line_breaks(model: Path, tmp_path: Path) -> None:
    text = "Crew A replaced the pitch\nbearing on T-14."
    source = tmp_path / "d.jsonl"
    source.write_text(json.dumps({"id": "a\tb", "text": text}) + "\n")
    result = _tag(str(model), str(source), "--output-format", "table")
    assert result.exit_code == 0, result.stderr
    rows = [line.split("\t") for line in result.stdout.splitlines()[1:]]
    assert rows and all(len(row) == 6 for row in rows)
    assert {row[0] for row in rows} == {"a\\tb"}
    unescaped = [row[5].replace("\\n", "\n") for row in rows]
    assert unescaped == [text[int(row[1]) : int(row[2])] for row in rows]
    assert "pitch\\nbearing" in [row[5] for row in rows]


# ---------------------------------------------------------------------------------------------
# Inputs and outputs


def test_stdin_to_stdout(model: Path, documents: list[str]) -> None:
    text = "\n\n".join(documents[:3])
    result = _tag(str(model), "-", input=text)
    assert result.exit_code == 0, result.stderr
    (record,) = _records(result.stdout)  # stdout holds data only
    assert record["text"] == text and record["id"] == "<stdin>"
    jsonl = "".join(json.dumps({"text": d}) + "\n" for d in documents[:3])
    piped = _tag(str(model), "--input-format", "jsonl", input=jsonl)
    assert [r["id"] for r in _records(piped.stdout)] == ["<stdin>:1", "<stdin>:2", "<stdin>:3"]
    # the summary, then the caution: nothing else
    assert piped.stderr.startswith("tagged 3 documents") and piped.stderr.count("\n") == 2
    assert piped.stderr.splitlines()[-1] == CAUTION


def test_empty_documents_pass_through(model: Path, tmp_path: Path) -> None:
    source = _jsonl(tmp_path / "docs.jsonl", ["", "Crew A replaced the gearbox on T-9.", " \n "])
    records = _records(_tag(str(model), str(source)).stdout)
    assert [r["id"] for r in records] == ["doc0", "doc1", "doc2"]
    assert records[0]["mentions"] == [] and records[2]["mentions"] == [] and records[1]["mentions"]
    empty = tmp_path / "empty.txt"
    empty.write_text("")
    (record,) = _records(_tag(str(model), str(empty)).stdout)
    assert record == {"id": str(empty), "text": "", "mentions": [], "needs_review": False}


def test_jsonl_keys_are_carried_through(model: Path, tmp_path: Path) -> None:
    original = {
        "source": "ops",
        "text": "Oil on T-3.",
        "id": 17,
        "meta": {"a": [1, None]},
        "n": 2.5,
    }
    source = tmp_path / "d.jsonl"
    source.write_text(json.dumps(original) + "\n\n")  # a blank line is not a document
    (record,) = _records(_tag(str(model), str(source)).stdout)
    assert list(record) == [*original, "mentions", "needs_review"]
    assert {k: record[k] for k in original} == original


def test_records_written_under_the_earlier_keys_are_tagged_anew(
    model: Path, tmp_path: Path
) -> None:
    earlier = [
        {"id": "a", "text": "Oil on T-3.", "site": "N", "spans": [{"start": 7}], "review": True},
        {"id": "b", "text": "Crew A replaced the gearbox on T-9.", "spans": [], "review": False},
        {"id": "c", "text": "No fault.", "review": "kept: no spans key"},
    ]
    source = tmp_path / "earlier.jsonl"
    source.write_text("".join(json.dumps(r) + "\n" for r in earlier))
    result = _tag(str(model), str(source))
    assert result.exit_code == 0, result.stderr
    records = _records(result.stdout)
    assert [list(r) for r in records] == [
        ["id", "text", "site", "mentions", "needs_review"],
        ["id", "text", "mentions", "needs_review"],
        ["id", "text", "review", "mentions", "needs_review"],
    ]
    fresh = _records(
        _tag(str(model), str(_jsonl(tmp_path / "d.jsonl", [earlier[1]["text"]]))).stdout
    )
    assert records[1]["mentions"] == fresh[0]["mentions"]
    notes = [line for line in result.stderr.splitlines() if line.startswith("note: ")]
    assert notes == [
        f'note: {source} (from line 1) uses the earlier record keys "spans" and "review"; they '
        'are dropped and the findings written anew as "mentions" and "needs_review"'
    ]


def test_input_format_from_the_file_name() -> None:
    expected = {"a.jsonl": "jsonl", "a.JSON": "jsonl", "a.conll": "columns", "b.bio": "columns",
                "c.iob": "columns", "d.tsv": "columns", "e.txt": "text", "f": "text", "-": "text"}  # fmt: skip
    assert {name: detect_input_format(name) for name in expected} == expected


def test_tokenizer_settings_travel_in_the_model_file(model: Path, tmp_path: Path) -> None:
    meta = load_model_file(model)[1]
    assert meta["tokenizer"] == TokenizerSettings().to_dict()
    # A copy of the model whose stored settings split hyphens: tagging must use them.
    tagger = Tagger.load(model)
    split = TokenizerSettings(split_hyphens=True)
    tagger.save(tmp_path / "split.tagger", {"tokenizer": split.to_dict()})
    text = "Crew A replaced the gearbox on T-14."
    source = tmp_path / "t.txt"
    source.write_text(text)
    shown = runner.invoke(app, ["tokenize", str(source), "--model", str(tmp_path / "split.tagger")])
    tokens = [line.split("\t")[0] for line in shown.stdout.splitlines() if line]
    assert tokens == [t.text for s in split_sentences(text, split) for t in s.tokens]
    assert "-" in tokens
    mentions = Tagger.load(tmp_path / "split.tagger").tag([text])[0]
    # Hyphens split: no mention can hold "T-14" as one token, so none starts at "14".
    sentence_tokens = [t for s in split_sentences(text, split) for t in s.tokens]
    starts = {t.start for t in sentence_tokens}
    assert all(m.start in starts for m in mentions)


def test_tokenize_prints_tokens_with_offsets(tmp_path: Path) -> None:
    text = "Crew B swapped the pitch bearing on T-14. Vibration hit 7.2 mm/s!\n\nNo fault."
    result = runner.invoke(app, ["tokenize", "-"], input=text)
    assert result.exit_code == 0, result.stderr
    blocks = [b for b in result.stdout.split("\n\n") if b.strip()]
    expected = split_sentences(text)
    assert len(blocks) == len(expected) == 3
    for block, sentence in zip(blocks, expected, strict=True):
        rows = [line.split("\t") for line in block.splitlines()]
        assert [(r[0], int(r[1]), int(r[2])) for r in rows] == [
            (t.text, t.start, t.end) for t in sentence.tokens
        ]
        assert all(text[int(r[1]) : int(r[2])] == r[0] for r in rows)


# The record of a mention: type, the pair of offsets, the quote, the confidence to four places.
_MENTION_REPR = "{'type': 'DRUG', 'at': [0, 7], 'quote': 'aspirin', 'confidence': 0.9712}\n"


def test_import_tagger_does_not_load_torch() -> None:
    code = (
        "import sys, tagger; light = 'torch' not in sys.modules\n"
        "from tagger import Mention, Tagger\n"
        "print(light, 'torch' in sys.modules, callable(Tagger.load), Tagger is tagger.Tagger,\n"
        "      Mention('DRUG', 0, 7, 'aspirin', 0.971234).to_record())"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.split(maxsplit=4) == ["True", "False", "True", "True", _MENTION_REPR]


def test_tag_wants_a_list_of_texts_and_tag_text_takes_one(model: Path) -> None:
    tagger = _api(model)
    text = "Crew A replaced the gearbox on T-9. Vibration hit 7.2 mm/s at T-14."
    with pytest.raises(TypeError, match="tag_text"):
        tagger.tag(text)
    mentions = tagger.tag_text(text)
    assert mentions, "the model should find mentions in this text"
    assert mentions == tagger.tag([text])[0]
    assert tagger.tag(iter([text, ""]))[0] == mentions


def test_tagger_tokenizes_with_its_stored_settings(model: Path, tmp_path: Path) -> None:
    split = TokenizerSettings(split_hyphens=True)
    Tagger.load(model).save(tmp_path / "split.tagger", {"tokenizer": split.to_dict()})
    tagger = Tagger.load(tmp_path / "split.tagger")
    assert tagger.tokenizer_settings == split
    text = "Crew A replaced the gearbox on T-14."
    assert tagger.tokenize(text) == split_sentences(text, split)
    assert [t.text for s in tagger.tokenize(text) for t in s.tokens][-4:] == ["T", "-", "14", "."]


_CACHE_SETTING = "ONEDNN_PRIMITIVE_CACHE_CAPACITY"


@pytest.mark.parametrize(
    "start",
    [
        "Tagger.load(model, threads=1); assert torch.get_num_threads() == 1",
        "tag_files(model, [source], out)",
    ],
)
def test_the_kernel_cache_is_capped_when_tagging_starts_not_on_import(
    model: Path, tmp_path: Path, start: str
) -> None:
    source = tmp_path / "in.txt"
    source.write_text(GOOD)
    code = (
        "import os, pkgutil, importlib, sys\n"
        f"os.environ.pop({_CACHE_SETTING!r}, None)\n"
        "import tagger, tagger.apply, tagger.cli\n"
        "for found in pkgutil.iter_modules(tagger.apply.__path__, 'tagger.apply.'):\n"
        "    importlib.import_module(found.name)\n"
        f"assert {_CACHE_SETTING!r} not in os.environ, 'set on import'\n"
        "import torch\n"
        "from tagger import Tagger\n"
        "from tagger.apply.tagging import tag_files\n"
        f"model, source, out = {str(model)!r}, {str(source)!r}, {str(tmp_path / 'out.jsonl')!r}\n"
        f"{start}\n"
        f"print(os.environ[{_CACHE_SETTING!r}])\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["64"]


def test_a_kernel_cache_setting_already_made_wins(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(_CACHE_SETTING, "7")
    limit_kernel_cache()
    assert os.environ[_CACHE_SETTING] == "7"
    monkeypatch.delenv(_CACHE_SETTING)
    limit_kernel_cache()
    assert os.environ[_CACHE_SETTING] == "64"


# ---------------------------------------------------------------------------------------------
# Bad input: stop (exit 1, file:line, no output) or skip (listed in the summary)

GOOD = "Crew A replaced the gearbox on T-9."


def _bad_jsonl_line(tmp_path: Path) -> tuple[Path, int, str, list[str]]:
    path = tmp_path / "in.jsonl"
    path.write_text(
        json.dumps({"text": GOOD})
        + '\n{"text": "unterminated\n'
        + json.dumps({"text": GOOD})
        + "\n"
    )
    return path, 2, "not valid JSON", []


def _jsonl_without_text(tmp_path: Path) -> tuple[Path, int, str, list[str]]:
    path = tmp_path / "in.jsonl"
    path.write_text(json.dumps({"text": GOOD}) + "\n" + json.dumps({"body": GOOD}) + "\n")
    return path, 2, 'no "text"', []


def _undecodable_jsonl(tmp_path: Path) -> tuple[Path, int, str, list[str]]:
    path = tmp_path / "in.jsonl"
    good = json.dumps({"text": GOOD}).encode()
    path.write_bytes(good + b"\n" + good + b"\n" + b'{"text": "caf\xe9"}\n' + good + b"\n")
    return path, 3, "not valid UTF-8", []


def _undecodable_text(tmp_path: Path) -> tuple[Path, int, str, list[str]]:
    path = tmp_path / "in.txt"
    before = GOOD.encode() + b"\n\nThe caf"
    path.write_bytes(before + b"\xe9 crew.\n")
    return path, 3, f"byte offset {len(before)} ", []


def _undecodable_columns(tmp_path: Path) -> tuple[Path, int, str, list[str]]:
    path = tmp_path / "in.conll"
    path.write_bytes(b"gearbox\tO\non\tO\n\ncaf\xe9\tO\nT-9\tO\n\nT-3\tO\n")
    return path, 4, "not valid UTF-8", []


def _long_text_sentence(tmp_path: Path) -> tuple[Path, int, str, list[str]]:
    path = tmp_path / "in.txt"
    path.write_text(f"{GOOD}\n\n{GOOD}\nthe crew checked the gearbox and the yaw drive and left\n")
    return path, 4, "longer than max_sentence_tokens=8", ["--max-sentence-tokens", "8"]


def _long_columns_sentence(tmp_path: Path) -> tuple[Path, int, str, list[str]]:
    path = tmp_path / "in.conll"
    path.write_text("gearbox\nok\n\n" + "".join(f"w{i}\n" for i in range(9)) + "\nT-3\n")
    return path, 4, "9 tokens is longer than max_sentence_tokens=8", ["--max-sentence-tokens", "8"]


@pytest.mark.parametrize(
    "make",
    [_bad_jsonl_line, _jsonl_without_text, _undecodable_jsonl, _undecodable_text,
     _undecodable_columns, _long_text_sentence, _long_columns_sentence],
)  # fmt: skip
def test_bad_input_stops_or_is_skipped(model: Path, tmp_path: Path, make) -> None:
    source, line, message, extra = make(tmp_path)
    good = _jsonl(tmp_path / "good.jsonl", [GOOD])  # a second input, read after the bad one
    out = tmp_path / "out" / "tagged.jsonl"
    out.parent.mkdir()
    stopped = _tag(str(model), str(source), str(good), "--out", str(out), *extra)
    assert stopped.exit_code == 1
    assert stopped.stderr.startswith(f"tagger: error: {source}:{line}: ")
    assert message in stopped.stderr and stopped.stderr.count("\n") == 1
    assert list(out.parent.iterdir()) == []  # no output, not even a temporary file

    skipped = _tag(
        str(model), str(source), str(good), "--out", str(out), "--on-error", "skip", *extra
    )
    assert skipped.exit_code == 0, skipped.stderr
    summary, *listed, caution = skipped.stderr.splitlines()
    assert summary.endswith("; 1 skipped") and len(listed) == 1 and caution == CAUTION
    assert listed[0].startswith(f"  skipped {source}:{line}: ") and message in listed[0]
    ids = [str(r["id"]) for r in _records(out.read_text())]
    assert ids[-1] == "doc0"  # the run went on to the next input
    assert f"{source}:{line}" not in ids and str(source) not in ids


def test_skip_lists_every_bad_item_in_order(model: Path, tmp_path: Path) -> None:
    path = tmp_path / "in.jsonl"
    good = json.dumps({"text": GOOD})
    path.write_text("\n".join([good, "{", good, "[]", '{"text": 3}', good]) + "\n")
    result = _tag(str(model), str(path), "--on-error", "skip", "--chunk-chars", "10")
    *listed, caution = result.stderr.splitlines()[1:]
    assert caution == CAUTION
    assert [entry.split(": ")[0] for entry in listed] == [
        f"  skipped {path}:{n}" for n in (2, 4, 5)
    ]
    assert [r["id"] for r in _records(result.stdout)] == [f"{path}:{n}" for n in (1, 3, 6)]


def test_usage_errors_exit_2(model: Path, tmp_path: Path) -> None:
    source = _jsonl(tmp_path / "d.jsonl", [GOOD])
    assert _tag(str(model), str(tmp_path / "absent.txt")).exit_code == 2
    assert _tag(str(model), str(source), "--output-format", "xml").exit_code == 2
    assert _tag(str(model), str(source), "--min-score", "1.5").exit_code == 2
    assert _tag(str(model), str(source), "--on-error", "ignore").exit_code == 2


def test_the_library_call_matches_the_command(
    model: Path, documents: list[str], tmp_path: Path
) -> None:
    source = _jsonl(tmp_path / "d.jsonl", documents)
    out = tmp_path / "out.jsonl"
    summary = tag_files(model, [source], out, TagOptions(output_format="jsonl"))
    assert out.read_text() == _tag(str(model), str(source)).stdout
    assert summary.documents == len(documents) and summary.skipped == []
    assert summary.tokens == sum(len(s.tokens) for d in documents for s in split_sentences(d))
