"""Checks of the bundled demo corpus (data/demo) and of scripts/make_demo_data.py, which writes it."""

from __future__ import annotations

import importlib.util
import re
import sys
from pathlib import Path
from types import ModuleType

import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "data" / "demo"
SCRIPT = ROOT / "scripts" / "make_demo_data.py"
SPLITS = ("train", "dev", "test")
TYPES = ("ASSET", "COMPONENT", "DEFECT", "READING")
LABELS = {"O"} | {f"{p}-{t}" for p in "BI" for t in TYPES}

Sentence = list[tuple[str, str]]


def _load_script() -> ModuleType:
    spec = importlib.util.spec_from_file_location("make_demo_data", SCRIPT)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up while the class is built
    spec.loader.exec_module(module)
    return module


gen = _load_script()


def _read(split: str) -> list[Sentence]:
    """Read a split with a few lines of our own, failing on anything but token TAB label."""
    sentences: list[Sentence] = []
    current: Sentence = []
    text = (DEMO / f"{split}.txt").read_bytes().decode("utf-8")
    for number, line in enumerate(text.split("\n"), start=1):
        if not line:
            if current:
                sentences.append(current)
            current = []
            continue
        fields = line.split("\t")
        assert len(fields) == 2, f"{split}.txt:{number}: expected token TAB label"
        current.append((fields[0], fields[1]))
    assert not current, f"{split}.txt: the last sentence is not followed by a blank line"
    return sentences


@pytest.fixture(scope="module")
def corpus() -> dict[str, list[Sentence]]:
    return {split: _read(split) for split in SPLITS}


def _spans(sentence: Sentence) -> list[tuple[str, int, int]]:
    """(type, start, end) with end exclusive, for a well-formed IOB2 sentence."""
    found: list[tuple[str, int, int]] = []
    for i, (_, label) in enumerate(sentence):
        if label.startswith("B-"):
            found.append((label[2:], i, i + 1))
        elif label.startswith("I-"):
            kind, start, _ = found[-1]
            found[-1] = (kind, start, i + 1)
    return found


def _span_texts(sentences: list[Sentence], types: tuple[str, ...]) -> list[tuple[str, str]]:
    return [
        (kind, " ".join(t for t, _ in s[a:b]))
        for s in sentences
        for kind, a, b in _spans(s)
        if kind in types
    ]


def test_regenerating_with_the_default_seed_reproduces_the_files_byte_for_byte(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert gen.main(["--out", str(tmp_path)]) == 0
    for split in SPLITS:
        assert (tmp_path / f"{split}.txt").read_bytes() == (DEMO / f"{split}.txt").read_bytes()
    # The script prints the counts the README quotes.
    assert "Spans per type" in capsys.readouterr().out


def test_another_seed_gives_another_corpus(tmp_path: Path) -> None:
    gen.main(["--out", str(tmp_path), "--seed", "7"])
    assert (tmp_path / "test.txt").read_bytes() != (DEMO / "test.txt").read_bytes()


@pytest.mark.parametrize("split", SPLITS)
def test_files_are_utf8_lf_columns_with_one_blank_line_between_sentences(split: str) -> None:
    raw = (DEMO / f"{split}.txt").read_bytes()
    text = raw.decode("utf-8")
    assert b"\r" not in raw
    assert text.endswith("\n\n") and not text.endswith("\n\n\n")
    assert "\n\n\n" not in text
    for line in text.split("\n"):
        if line:
            token, label = line.split("\t")
            assert token and not re.search(r"\s", token), repr(line)
            assert label in LABELS, repr(line)


@pytest.mark.parametrize("split", SPLITS)
def test_labels_are_well_formed_iob2(corpus: dict[str, list[Sentence]], split: str) -> None:
    for sentence in corpus[split]:
        previous = "O"
        for token, label in sentence:
            if label.startswith("I-"):
                # IOB2: an inside tag continues a span of the same type, never starts one.
                assert previous[2:] == label[2:] and previous != "O", (token, label, sentence)
            previous = label


def test_span_extraction_agrees_with_seqeval(corpus: dict[str, list[Sentence]]) -> None:
    entities = pytest.importorskip("seqeval.metrics.sequence_labeling").get_entities
    for split in SPLITS:
        sentences = corpus[split]
        # Reference: seqeval's get_entities on a list of sentences joins them with one "O" between
        # and returns (type, start, end) with end inclusive.
        expected = entities([[label for _, label in s] for s in sentences])
        ours, offset = [], 0
        for s in sentences:
            ours += [(kind, offset + a, offset + b - 1) for kind, a, b in _spans(s)]
            offset += len(s) + 1
        assert ours == expected
        # The script counts spans with its own reader; it must see the same spans.
        assert [sp for s in sentences for sp in gen.spans(s)] == _span_texts(sentences, TYPES)


def test_split_sizes_and_sentence_lengths(corpus: dict[str, list[Sentence]]) -> None:
    assert 2700 <= len(corpus["train"]) <= 3300
    for split in ("dev", "test"):
        assert 450 <= len(corpus[split]) <= 550
    lengths = [len(s) for split in SPLITS for s in corpus[split]]
    assert min(lengths) >= 4 and max(lengths) <= 45
    assert sum(n >= 30 for n in lengths) > 100 and sum(n <= 8 for n in lengths) > 100


@pytest.mark.parametrize("split", SPLITS)
def test_every_type_appears_often_in_every_split(
    corpus: dict[str, list[Sentence]], split: str
) -> None:
    kinds = [kind for kind, _ in _span_texts(corpus[split], TYPES)]
    for kind in TYPES:
        assert kinds.count(kind) >= 100, (split, kind)
    longest = max(b - a for s in corpus[split] for _, a, b in _spans(s))
    assert longest >= 4  # multi-token spans, not just single words


def test_test_split_has_component_and_defect_names_train_never_has(
    corpus: dict[str, list[Sentence]],
) -> None:
    train = set(_span_texts(corpus["train"], ("COMPONENT", "DEFECT")))
    train_words = {t.lower() for s in corpus["train"] for t, _ in s}
    test = _span_texts(corpus["test"], ("COMPONENT", "DEFECT"))
    unseen = [span for span in test if span not in train]
    assert len(unseen) >= 0.25 * len(test)
    # Held-out combinations: new names made only of words train does have.
    from_known_words = {
        span for span in unseen if all(w.lower() in train_words for w in span[1].split())
    }
    assert len(from_known_words) >= 30


def test_no_sentence_is_shared_between_splits(corpus: dict[str, list[Sentence]]) -> None:
    def keys(split: str) -> set[tuple[str, ...]]:
        return {tuple(t for t, _ in s) for s in corpus[split]}

    train, dev, test = keys("train"), keys("dev"), keys("test")
    assert not train & test and not train & dev and not dev & test
    assert len(train) == len(corpus["train"])  # no duplicates inside train either


@pytest.mark.parametrize(
    ("text", "tokens"),
    [  # hand-worked: what a simple rule-based tokeniser gives
        ("T-14,", ["T-14", ","]),
        ("85°C", ["85°C"]),
        ("85 °C", ["85", "°C"]),
        ("hit 7.2 mm/s.", ["hit", "7.2", "mm/s", "."]),
        ("1,450 rpm", ["1,450", "rpm"]),
        ("7,2 mm/s", ["7,2", "mm/s"]),
        (".5 mm", [".5", "mm"]),
        ("(limit 2.7 mm)", ["(", "limit", "2.7", "mm", ")"]),
        ("08:40 - WO-4471:", ["08:40", "-", "WO-4471", ":"]),
        ("80-85 °C on 14/03", ["80-85", "°C", "on", "14/03"]),
        ("ice build-up, -12°C", ["ice", "build-up", ",", "-12°C"]),
        ("WTG07 and WTG 07", ["WTG07", "and", "WTG", "07"]),
    ],
)
def test_tokeniser(text: str, tokens: list[str]) -> None:
    assert gen.tokenise(text) == tokens


def test_tokens_are_what_the_tokeniser_gives(corpus: dict[str, list[Sentence]]) -> None:
    for split in SPLITS:
        for sentence in corpus[split]:
            for token, _ in sentence:
                assert gen.tokenise(token) == [token], (split, token)


def test_context_decides_whether_a_word_is_an_entity(corpus: dict[str, list[Sentence]]) -> None:
    train = [pair for s in corpus["train"] for pair in s]
    labels_of: dict[str, set[str]] = {}
    for token, label in train:
        labels_of.setdefault(token.lower(), set()).add(label[2:] if label != "O" else "O")
    assert {"O", "DEFECT"} <= labels_of["crack"]  # "crack open the hatch" / "found a crack"
    assert {"ASSET", "COMPONENT"} <= labels_of["bearing"]  # "Bearing Hill" / "main bearing"
    assert {"O", "COMPONENT"} <= labels_of["unit"] and "ASSET" in labels_of["unit"]
    assert {"O", "READING"} <= labels_of["2"]  # "2 technicians" / "2 bar"
    # Work orders, fault codes and part numbers look like ids and numbers but are never entities.
    for token, label in train:
        if re.fullmatch(r"(WO|F|E)-\d+|\d{2}-\d{4}", token):
            assert label == "O", token
