"""Checks of the bundled demo corpus (data/demo) and of scripts/make_demo_data.py, which writes it."""

from __future__ import annotations

import contextlib
import gzip
import importlib.util
import io
import random
import re
import sys
from collections.abc import Iterator
from pathlib import Path
from types import ModuleType

import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "data" / "demo"
SCRIPT = ROOT / "scripts" / "make_demo_data.py"
SPLITS = ("train", "dev", "test")
ARCHIVE = DEMO / "unannotated.txt.gz"
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


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, str]:
    """The demo folder written afresh with the default seed, and what the script printed."""
    out = tmp_path_factory.mktemp("demo")
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        assert gen.main(["--out", str(out)]) == 0
    return out, printed.getvalue()


@pytest.fixture(scope="module")
def archive_text() -> str:
    return gzip.decompress(ARCHIVE.read_bytes()).decode("utf-8")


def _archive_lines(text: str) -> Iterator[str]:
    return (line for line in text.split("\n") if line)


def test_regenerating_with_the_default_seed_reproduces_the_files_byte_for_byte(
    regenerated: tuple[Path, str], archive_text: str
) -> None:
    out, printed = regenerated
    for name in (*[f"{split}.txt" for split in SPLITS], "lexicon.tsv"):
        assert (out / name).read_bytes() == (DEMO / name).read_bytes(), name
    # The archive is compared unpacked: the text is the script's; the deflate bytes are zlib's,
    # which another zlib build may lay out differently (the header is checked below).
    assert gzip.decompress((out / ARCHIVE.name).read_bytes()).decode("utf-8") == archive_text
    # The script prints the counts the README quotes.
    assert "Spans per type" in printed
    assert "81 of the 81 names withheld from train occur in it" in printed


def test_another_seed_gives_another_corpus(tmp_path: Path) -> None:
    gen.main(["--out", str(tmp_path), "--seed", "7"])
    assert (tmp_path / "test.txt").read_bytes() != (DEMO / "test.txt").read_bytes()


def test_the_archive_gzip_header_holds_no_file_name_and_no_time() -> None:
    header = ARCHIVE.read_bytes()[:10]
    # RFC 1952: magic 1f 8b, method 8 (deflate), flags (FNAME is bit 3), then a 4-byte mtime.
    assert header[:3] == b"\x1f\x8b\x08"
    assert header[3] == 0  # no file name, comment or extra field
    assert header[4:8] == b"\x00\x00\x00\x00"


def test_the_same_seed_gives_the_same_archive_bytes_and_another_seed_other_reports(
    tmp_path: Path,
) -> None:
    reports = gen.generate_unannotated(3, sentences=300)
    assert reports == gen.generate_unannotated(3, sentences=300)
    assert sum(len(r) for r in reports) == 300
    assert reports != gen.generate_unannotated(4, sentences=300)
    gen.write_unannotated(reports, tmp_path / "a.txt.gz")
    gen.write_unannotated(reports, tmp_path / "b.txt.gz")
    assert (tmp_path / "a.txt.gz").read_bytes() == (tmp_path / "b.txt.gz").read_bytes()
    text = gzip.decompress((tmp_path / "a.txt.gz").read_bytes()).decode("utf-8")
    assert text == gen.format_unannotated(reports)


def test_a_second_stream_draws_the_sentences_and_the_first_the_name_pools() -> None:
    # How the archive keeps the splits' stream untouched: its Generator takes the pools from the
    # main seed's stream, and every sentence from a stream of its own.
    alone = gen.Generator(random.Random(5))
    paired = gen.Generator(random.Random(5), draws=random.Random(6))
    for pool in ("heldout_components", "heldout_defects", "heldout_sites", "components"):
        assert getattr(paired, pool) == getattr(alone, pool), pool
    assert paired.heldout_single_defects.names == alone.heldout_single_defects.names
    drawn = [paired.sentence() for _ in range(20)]
    assert drawn != [alone.sentence() for _ in range(20)]
    again = gen.Generator(random.Random(99), draws=random.Random(6))
    assert [again.sentence() for _ in range(20)] != drawn  # other pools, other names


def test_the_archive_is_plain_text_reports_without_labels(archive_text: str) -> None:
    assert "\r" not in archive_text and "\t" not in archive_text
    assert archive_text.endswith("\n\n") and "\n\n\n" not in archive_text
    reports = archive_text.rstrip("\n").split("\n\n")
    assert all(1 <= len(report.split("\n")) <= 4 for report in reports)
    sentences = list(_archive_lines(archive_text))
    assert len(sentences) == 40_000
    assert len(reports) < 0.6 * len(sentences)  # most reports hold more than one sentence
    label = re.compile(r"(?<!\S)[BI]-(?:ASSET|COMPONENT|DEFECT|READING)(?!\S)")
    assert not any(label.search(line) for line in sentences)
    assert len(ARCHIVE.read_bytes()) < 2 * 2**20


def test_no_sentence_of_the_annotated_splits_is_in_the_archive(
    corpus: dict[str, list[Sentence]], archive_text: str
) -> None:
    archive = {tuple(gen.tokenise(line)) for line in _archive_lines(archive_text)}
    for split in SPLITS:
        keys = {tuple(t for t, _ in s) for s in corpus[split]}
        assert not keys & archive, split
    assert len(archive) > 30_000  # fresh sentences, not a few repeated


def _name_counts(token_lists: list[list[str]], names: set[str]) -> dict[str, int]:
    """Occurrences of each name as whole tokens, case ignored."""
    wanted = {tuple(gen.tokenise(name.lower())): name for name in names}
    longest = max(len(key) for key in wanted)
    counts = dict.fromkeys(names, 0)
    for tokens in token_lists:
        lowered = [t.lower() for t in tokens]
        for i in range(len(lowered)):
            for n in range(1, min(longest, len(lowered) - i) + 1):
                name = wanted.get(tuple(lowered[i : i + n]))
                if name is not None:
                    counts[name] += 1
    return counts


def test_withheld_names_occur_in_the_archive_about_as_often_as_the_others(
    corpus: dict[str, list[Sentence]], archive_text: str
) -> None:
    _, withheld = gen.demo_lexicon()
    pools = gen.Generator(random.Random(gen.DEFAULT_SEED))
    every_name = (
        {f"{m} {h}" for m, h in pools.components + pools.heldout_components}
        | {f"{m} {h}" for m, h, _ in pools.defects + pools.heldout_defects}
        | set(pools.single_components.names + pools.heldout_single_components.names)
        | set(pools.single_defects.names + pools.heldout_single_defects.names)
    )
    assert withheld < every_name and len(withheld) == 81
    archive = [gen.tokenise(line) for line in _archive_lines(archive_text)]
    counts = _name_counts(archive, every_name)
    assert min(counts[name] for name in withheld) >= 20  # every one of them, many times

    def withheld_share(token_lists: list[list[str]]) -> float:
        found = _name_counts(token_lists, every_name)
        return sum(found[n] for n in withheld) / sum(found.values())

    # A withheld name's share of the name occurrences: near nothing in train (only inside other
    # names, "crack" in "hairline crack"), inflated in test on purpose, and in between in the
    # archive, where names are drawn at their share of each pool.
    train = withheld_share([[t for t, _ in s] for s in corpus["train"]])
    test = withheld_share([[t for t, _ in s] for s in corpus["test"]])
    share = withheld_share(archive)
    assert train < 0.05 and 0.1 < share < 0.3 and test > share + 0.1


@pytest.mark.parametrize(
    ("tokens", "text"),
    [  # hand-worked: punctuation against the word before, "(" against the word after
        (["Re", "T-14", ":", "gbx", "oil", "leak", "."], "Re T-14: gbx oil leak."),
        (["ordered", "a", "fan", "(", "part", "no", ".", "69-2720", ")"],
         "ordered a fan (part no. 69-2720)"),
        (["job", "90", "%", "done", ",", "85°C", "!"], "job 90 % done, 85°C!"),
        (["wind", "7.2", "m/s", ";", "1,450", "rpm"], "wind 7.2 m/s; 1,450 rpm"),
    ],
)  # fmt: skip
def test_detokenise(tokens: list[str], text: str) -> None:
    assert gen.detokenise(tokens) == text
    assert gen.tokenise(text) == tokens


def test_detokenised_sentences_give_their_tokens_back(corpus: dict[str, list[Sentence]]) -> None:
    for split in SPLITS:
        for sentence in corpus[split]:
            tokens = [t for t, _ in sentence]
            assert gen.tokenise(gen.detokenise(tokens)) == tokens


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


def test_learn_vectors_reads_every_word_of_the_withheld_names_from_the_archive() -> None:
    # The archive is read as `tagger learn-vectors` reads it: a .txt.gz file as one text, cut by
    # the default config's tokenizer, which is not the script's tokeniser.
    from tagger.config import load_config
    from tagger.unannotated.raw_text import raw_sentences

    settings = load_config(ROOT / "configs" / "default.toml").tokenizer_settings()
    counts: dict[str, int] = {}
    for tokens in raw_sentences([ARCHIVE], settings):
        for token in tokens:
            counts[token] = counts.get(token, 0) + 1
    _, withheld = gen.demo_lexicon()
    words = {word for name in withheld for word in gen.tokenise(name)}
    # Well above learn-vectors' --min-count (3): each word gets a vector row of its own.
    assert min(counts.get(word, 0) for word in words) >= 20
