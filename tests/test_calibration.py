"""Tests of calibrated scores, the review flag, evaluation for error analysis and what a model
file stores, on a tiny model trained once for the module."""

from __future__ import annotations

import json
import math
import random
from pathlib import Path

import pytest
import torch
from model_files import tiny_training_config
from typer.testing import CliRunner

from tagger.apply.calibration import (
    HIGHEST,
    LOWEST,
    calibrate_model_file,
    gold_label_loss,
    minimise_log_scale,
)
from tagger.apply.documents import Document
from tagger.apply.engine import Analysed, Mention, TaggedDocument
from tagger.apply.evaluate import evaluate_files
from tagger.apply.outputs import DocumentFormatter
from tagger.apply.predict import label_probabilities, tempered_crf
from tagger.apply.tagger import Tagger
from tagger.cli import app
from tagger.config import Config, ModelConfig
from tagger.data.corpus import read_sentences
from tagger.data.schemes import spans_lenient
from tagger.network.modelfile import load_model_file
from tagger.network.net import build_net
from tagger.reports.notes import CAUTION
from tagger.text.vocab import Vocab, Vocabularies, build_vocabularies
from tagger.training.loop import train

runner = CliRunner()

PARTS = ["pitch bearing", "yaw drive", "gearbox", "main shaft", "brake pad", "slip ring"]
SITES = ["T-14", "T-3", "WTG 07", "Kelp Reach"]
FAULTS = ["oil leak", "crack", "pitting", "overheating"]
TEMPLATES = [
    "Crew replaced the {COMP} on {ASSET} .",
    "{COMP} showed {DEF} at {ASSET} .",
    "No fault found on {ASSET} .",
    "Found {DEF} on the {COMP} .",
    "{ASSET} stopped after {DEF} .",
]


def _sentences(seed: int, count: int) -> list[list[tuple[str, str]]]:
    rng = random.Random(seed)
    pools = {"COMP": PARTS, "ASSET": SITES, "DEF": FAULTS}
    out = []
    for _ in range(count):
        rows: list[tuple[str, str]] = []
        for piece in rng.choice(TEMPLATES).split():
            if piece.startswith("{"):
                kind = piece[1:-1]
                words = rng.choice(pools[kind]).split()
                rows += [(w, ("B-" if i == 0 else "I-") + kind) for i, w in enumerate(words)]
            else:
                rows.append((piece, "O"))
        out.append(rows)
    return out


def _write(path: Path, sentences: list[list[tuple[str, str]]]) -> Path:
    path.write_text(
        "".join("".join(f"{t}\t{label}\n" for t, label in s) + "\n" for s in sentences),
        encoding="utf-8",
    )
    return path


def _config(train_path: Path, dev_path: Path) -> Config:
    return tiny_training_config(train_path, dev_path, epochs=4, batch_size=8, learning_rate=0.02)


@pytest.fixture(scope="module")
def files(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("data")
    return {
        "train": _write(folder / "train.txt", _sentences(1, 50)),
        "dev": _write(folder / "dev.txt", _sentences(2, 30)),
        "test": _write(folder / "test.txt", _sentences(3, 30)),
    }


@pytest.fixture(scope="module")
def run(files: dict[str, Path], tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A run folder of a tiny CRF tagger, a few seconds of training."""
    folder = tmp_path_factory.mktemp("run") / "run"
    train(_config(files["train"], files["dev"]), folder)
    return folder


# --- the temperature ------------------------------------------------------------------------


def test_the_search_finds_a_known_minimum_and_stops_at_the_bounds() -> None:
    assert minimise_log_scale(lambda t: (math.log(t) - math.log(2.2)) ** 2, LOWEST, HIGHEST) == (
        pytest.approx(2.2, rel=0.01)
    )
    assert minimise_log_scale(lambda t: -t, LOWEST, HIGHEST) == pytest.approx(HIGHEST, rel=0.01)
    assert minimise_log_scale(lambda t: t, LOWEST, HIGHEST) == pytest.approx(LOWEST, rel=0.01)


def test_training_fits_and_stores_a_temperature(run: Path, files: dict[str, Path]) -> None:
    tagger = Tagger.load(run / "model.tagger")
    stored = tagger.meta["calibration"]
    assert stored == json.loads((run / "outcome.json").read_text())["calibration"]
    assert tagger.temperature == stored["temperature"] != 1.0
    assert stored["loss_after"] <= stored["loss_before"]
    dev = read_sentences(files["dev"])
    loss, tokens = gold_label_loss(
        tagger, [s.tokens for s in dev], [spans_lenient(s.labels) for s in dev]
    )
    assert tokens == stored["tokens"] == sum(len(s) for s in dev)
    assert loss(1.0) == pytest.approx(stored["loss_before"], abs=1e-5)
    # No temperature of a fine grid over the searched range does better than the fitted one.
    best = loss(tagger.temperature)
    grid = [LOWEST * (HIGHEST / LOWEST) ** (k / 60) for k in range(61)]
    assert all(best <= loss(t) + 1e-6 for t in grid)


def test_calibrating_again_fits_the_network_not_the_stored_temperature(
    run: Path, files: dict[str, Path], tmp_path: Path
) -> None:
    copy = tmp_path / "model.tagger"
    copy.write_bytes((run / "model.tagger").read_bytes())
    dev = read_sentences(files["dev"])
    gold = [spans_lenient(s.labels) for s in dev]
    fitted = calibrate_model_file(copy, dev, gold)
    again = calibrate_model_file(copy, dev, gold)
    assert fitted is not None and again == fitted
    tensors, meta = load_model_file(copy)
    assert meta["calibration"]["temperature"] == pytest.approx(fitted.temperature, abs=1e-6)
    original, _ = load_model_file(run / "model.tagger")
    assert all(torch.equal(tensors[name], original[name]) for name in original)


def test_a_temperature_changes_scores_never_spans(run: Path, files: dict[str, Path]) -> None:
    tagger = Tagger.load(run / "model.tagger")
    token_lists = [s.tokens for s in read_sentences(files["test"])] + [[], ["unseen", "T-99"]]
    by_temperature = {t: tagger.predict_sentences(token_lists, temperature=t) for t in (0.05, 1, 8)}
    spans = {t: [[s[:3] for s in found.spans] for found in v] for t, v in by_temperature.items()}
    assert spans[0.05] == spans[1] == spans[8] == tagger.predict_spans(token_lists)
    sharp, flat = by_temperature[0.05], by_temperature[8]
    assert min(found.certainty for found in sharp) > 0.99
    mean = {t: sum(f.certainty for f in v) / len(v) for t, v in by_temperature.items()}
    assert mean[8] < mean[1] < mean[0.05]
    assert all(found.spans == [] and found.certainty == 1.0 for found in (sharp[-2], flat[-2]))


def test_tempered_crf_divides_the_learnt_scores_and_keeps_the_constraints(run: Path) -> None:
    crf = Tagger.load(run / "model.tagger").net.crf
    tempered = tempered_crf(crf, 2.0)
    assert torch.allclose(tempered.transitions, crf.transitions / 2)
    assert torch.allclose(tempered.start, crf.start / 2) and torch.allclose(
        tempered.end, crf.end / 2
    )
    assert torch.equal(tempered.trans_ok, crf.trans_ok) and not bool(crf.trans_ok.all())


def test_softmax_probabilities_at_a_temperature() -> None:
    labels = ["O", "S-A", "B-A", "I-A", "E-A"]
    vocabs = Vocabularies(Vocab(["a"]), Vocab(["a"]), Vocab(labels, specials=False), False, False)
    model = ModelConfig(output="softmax", hidden_size=4, layers=1, word_dim=4, char_encoder="none")
    net = build_net(Config(model=model), vocabs)
    emissions = torch.randn(2, 3, len(labels), generator=torch.Generator().manual_seed(0))
    mask = torch.ones(2, 3, dtype=torch.bool)
    # Reference: a softmax of the scores divided by the temperature.
    expected = torch.softmax(emissions / 3.0, -1)
    assert torch.allclose(label_probabilities(net, emissions, mask, 3.0), expected)
    assert torch.allclose(label_probabilities(net, emissions, mask), emissions.softmax(-1))


# --- the review flag ------------------------------------------------------------------------


def _tagged(certainty: float) -> TaggedDocument:
    document = Document("d1", "T-14 gearbox", "in.txt", 1)
    span = Mention("ASSET", 0, 4, "T-14", 0.99)
    analysed = Analysed(document, [["T-14", "gearbox"]], [[0, 5]], [[4, 12]])
    return TaggedDocument(document, [span], [[("ASSET", 0, 1, 0.99)]], analysed, certainty)


def test_a_document_sure_of_its_spans_but_not_of_a_word_outside_them_is_flagged() -> None:
    formatter = DocumentFormatter("jsonl", "IOB2", 0.0, 0.8)
    unsure, sure = _tagged(0.55), _tagged(0.9)
    assert json.loads(formatter.output(unsure).text)["needs_review"] is True
    assert json.loads(formatter.output(sure).text)["needs_review"] is False
    outputs = formatter.chunk([unsure, sure, unsure]).entries
    assert sum(output.review for output in outputs) == 2


# --- evaluation for error analysis ----------------------------------------------------------


def test_evaluation_carries_the_error_analysis(
    run: Path, files: dict[str, Path], tmp_path: Path
) -> None:
    tagger = Tagger.load(run / "model.tagger")
    side = tmp_path / "side.tsv"
    predictions = tmp_path / "pred.txt"
    paths = [files["test"], files["dev"]]
    result = evaluate_files(
        tagger, paths, predictions=predictions, side_by_side=side, examples=2, review_below=0.9
    )
    assert json.loads(json.dumps(result)) == result
    assert result["temperature"] == tagger.temperature
    assert result["temperature_fit"] == tagger.meta["calibration"]
    first, overall = result["files"][0], result["overall"]
    assert overall["f1_interval"]["sentences"] == 60 and first["f1_interval"]["sentences"] == 30
    assert first["f1_interval"]["low"] <= first["micro"]["f1"] <= first["f1_interval"]["high"]
    assert "examples" not in overall
    assert all(len(kind["examples"]) <= 2 for kind in first["examples"].values())
    assert overall["calibration"]["spans"] == overall["micro"]["predicted"]
    review = overall["review"]
    assert review["review_below"] == 0.9 and review["sentences"] == 60
    assert review["with_error"] == sum(
        f["review"]["with_error"] for f in result["files"]
    )  # per-sentence facts add up over files
    confused = sum(n for row in overall["type_confusion"].values() for n in row.values())
    assert confused == overall["breakdown"]["gold"]["wrong_type"]
    # The side-by-side file: token, gold, tagged and whether they agree, as in the other files.
    gold = [s for path in paths for s in read_sentences(path)]
    tagged = read_sentences(predictions)
    rows = [line.split("\t") for line in side.read_text().splitlines() if line]
    assert [r[0] for r in rows] == [t for s in gold for t in s.tokens]
    assert [r[1] for r in rows] == [label for s in gold for label in s.labels]
    assert [r[2] for r in rows] == [label for s in tagged for label in s.labels]
    assert [r[3] for r in rows] == ["same" if r[1] == r[2] else "DIFF" for r in rows]
    assert sum(r[3] == "DIFF" for r in rows) == round(
        (1 - overall["token_accuracy"]) * overall["tokens"]
    )
    nothing = evaluate_files(tagger, [files["test"]], examples=0, resamples=0)["overall"]
    assert nothing["f1_interval"] is None
    assert all(kind["examples"] == [] for kind in nothing["examples"].values())


def test_evaluate_command_options_and_caution(
    run: Path, files: dict[str, Path], tmp_path: Path
) -> None:
    model, test = str(run / "model.tagger"), str(files["test"])
    side = tmp_path / "side.tsv"
    text = runner.invoke(app, ["evaluate", model, test, "--side-by-side", str(side)])
    assert text.exit_code == 0, text.stderr
    assert text.stderr.splitlines() == [CAUTION]  # stdout holds the report only
    assert side.exists() and text.stdout.startswith(f"== {test} (30 sentences)\nSpan scores: F1")
    assert (
        "Review flag at 0.8 " in text.stdout and "How often tagged spans are right" in text.stdout
    )
    assert "temperature" in text.stdout.splitlines()[-1]
    as_json = runner.invoke(
        app, ["evaluate", model, test, "--json", "--resamples", "0", "--examples", "1",
              "--review-below", "0.95"],
    )  # fmt: skip
    assert as_json.exit_code == 0, as_json.stderr
    result = json.loads(as_json.stdout)
    assert result["overall"]["f1_interval"] is None
    assert result["overall"]["review"]["review_below"] == 0.95
    assert all(len(k["examples"]) <= 1 for k in result["overall"]["examples"].values())
    bad = runner.invoke(app, ["evaluate", model, test, "--review-below", "1.5"])
    assert bad.exit_code == 2


# --- what a model file stores ---------------------------------------------------------------


def test_words_seen_fewer_than_k_times_stay_out_of_the_vocabulary() -> None:
    sentences = [["Crew", "fixed", "T-14", "gearbox"], ["Crew", "saw", "T-15", "gearbox"]]
    vocabs, counts = build_vocabularies(sentences, ["O"], False, True, min_word_count=2)
    # "T-14" and "T-15" are the same word once digits read as 0: seen twice, stored as T-00.
    assert vocabs.words.itos[2:] == ["Crew", "T-00", "gearbox"]
    assert counts["fixed"] == 1 and "fixed" not in vocabs.words
    assert vocabs.words.index(vocabs.word_key("fixed")) == 1  # the unknown word
    everything, _ = build_vocabularies(sentences, ["O"], False, True)
    assert "fixed" in everything.words and "saw" in everything.words


def test_train_says_what_the_model_file_stores_and_k_keeps_rare_words_out(
    files: dict[str, Path], tmp_path: Path
) -> None:
    out = tmp_path / "run"
    rare = [[("Kessop", "B-ASSET"), ("ran", "O"), ("rough", "O")], [("quill", "O"), ("seen", "O")]]
    train_file = _write(tmp_path / "train.txt", _sentences(1, 50) + rare * 2)
    result = runner.invoke(
        app,
        ["train", "--train", str(train_file), "--dev", str(files["dev"]), "--out", str(out),
         "--set", "model.hidden_size=8", "--set", "model.layers=1", "--set", "train.epochs=1",
         "--set", "train.threads=1", "--set", "model.min_word_count=3"],
    )  # fmt: skip
    assert result.exit_code == 0, result.stderr
    _, meta = load_model_file(out / "model.tagger")
    stored = meta["vocabularies"]["words"]["items"]
    note = " ".join(result.stderr[result.stderr.index("note: the model") :].split())
    assert note.startswith(
        f"note: the model file stores {len(stored)} words (the words seen 3 times or more in "
        "train) in plain text"
    )
    counts: dict[str, int] = {}
    for sentence in read_sentences(train_file):
        for token in sentence.tokens:
            key = "".join("0" if c.isdigit() else c for c in token)
            counts[key] = counts.get(key, 0) + 1
    assert stored and all(counts[word] >= 3 for word in stored)
    assert {"Kessop", "quill", "rough"} <= {w for w, n in counts.items() if n < 3} - set(stored)
    assert "span scores calibrated on dev" in result.stderr
