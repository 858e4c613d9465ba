"""Counting test mentions seen in training, and recall on seen and unseen ones
(scripts/bench_mentions.py), on small hand-made column files whose answers are counted by hand."""

from __future__ import annotations

from pathlib import Path

import pytest

TRAIN = """\
Aspirin\tB-Chemical
causes\tO
renal\tB-Disease
failure\tI-Disease
.\tO

Naloxone\tB-Chemical
helped\tO
"""

# Test mentions, in order: aspirin (Chemical; seen only ignoring case), Aspirin (Chemical; seen),
# renal failure (Disease; seen), Aspirin (Disease; a training text, but of another type),
# acute pain (Disease; new).
TEST = """\
aspirin\tB-Chemical
and\tO
Aspirin\tB-Chemical
.\tO

renal\tB-Disease
failure\tI-Disease
after\tO
Aspirin\tB-Disease
and\tO
acute\tB-Disease
pain\tI-Disease
"""

# Found: Aspirin (Chemical, seen) and acute pain (Disease, unseen). Missed: aspirin (wrong type),
# renal failure (wrong edges), Aspirin as Disease (not tagged). One spurious span: "and".
PREDICTED = """\
aspirin\tB-Disease
and\tO
Aspirin\tB-Chemical
.\tO

renal\tB-Disease
failure\tO
after\tO
Aspirin\tO
and\tB-Chemical
acute\tB-Disease
pain\tI-Disease
"""


@pytest.fixture(scope="module")
def mentions(load_script):
    return load_script("bench_mentions")


@pytest.fixture()
def files(tmp_path: Path) -> dict[str, Path]:
    paths = {}
    for name, text in (("train", TRAIN), ("test", TEST), ("predicted", PREDICTED)):
        paths[name] = tmp_path / f"{name}.tsv"
        paths[name].write_text(text, encoding="utf-8")
    return paths


def test_mentions_are_type_and_text_with_their_edges(mentions, files) -> None:
    assert mentions.sentence_mentions(files["test"]) == [
        [(("Chemical", "aspirin"), (0, 1)), (("Chemical", "Aspirin"), (2, 3))],
        [
            (("Disease", "renal failure"), (0, 2)),
            (("Disease", "Aspirin"), (3, 4)),
            (("Disease", "acute pain"), (5, 7)),
        ],
    ]
    assert mentions.mention_set(files["train"]) == {
        ("Chemical", "Aspirin"),
        ("Chemical", "Naloxone"),
        ("Disease", "renal failure"),
    }


def test_seen_shares_count_occurrences_by_type_and_text(mentions, files) -> None:
    train = mentions.mention_set(files["train"])
    test = [m for sentence in mentions.sentence_mentions(files["test"]) for m, _ in sentence]
    shares = mentions.seen_shares(train, test)
    overall = shares["all"]
    assert (overall["mentions"], overall["seen"], overall["unseen"]) == (5, 2, 3)
    assert overall["seen_share"] == 0.4
    assert overall["unseen_share"] == 0.6
    assert overall["seen_ignoring_case_share"] == 0.6  # + aspirin
    assert overall["seen_as_any_type_ignoring_case_share"] == 0.8  # + Aspirin as a Disease
    assert (overall["distinct_texts"], overall["distinct_seen"]) == (5, 2)
    chemical, disease = shares["per_type"]["Chemical"], shares["per_type"]["Disease"]
    assert (chemical["mentions"], chemical["seen"], chemical["seen_ignoring_case_share"]) == (
        2,
        1,
        1.0,
    )
    assert (disease["mentions"], disease["seen"], disease["unseen"]) == (3, 1, 2)


def test_recall_is_split_between_seen_and_unseen_mentions(mentions, files) -> None:
    train = mentions.mention_set(files["train"])
    gold = mentions.sentence_mentions(files["test"])
    predicted = mentions.sentence_mentions(files["predicted"])
    exact = mentions.recall_by_seen(gold, predicted, train.__contains__)
    chemical, disease = exact["Chemical"], exact["Disease"]

    def group(mentions: int, found: int, recall: float, predicted: int, precision: float, f1):
        keys = ("mentions", "found", "recall", "predicted", "precision", "f1")
        return dict(zip(keys, (mentions, found, recall, predicted, precision, f1), strict=True))

    # Predicted spans fall in a group by their own type and text: (Chemical, Aspirin) is seen;
    # (Chemical, and), (Disease, aspirin), (Disease, renal) and (Disease, acute pain) are not.
    assert chemical["seen"] == group(1, 1, 1.0, 1, 1.0, 1.0)
    assert chemical["unseen"] == group(1, 0, 0.0, 1, 0.0, 0.0)
    assert disease["seen"] == group(1, 0, 0.0, 0, 0.0, 0.0)
    assert disease["unseen"] == group(2, 1, 0.5, 3, 0.3333, 0.4)
    # Chemical: 2 tagged (Aspirin right, "and" wrong); Disease: 3 tagged (acute pain right).
    assert (chemical["precision"], chemical["recall"], chemical["f1"]) == (0.5, 0.5, 0.5)
    assert (disease["precision"], disease["recall"]) == (0.3333, 0.3333)
    pooled = exact["all"]
    assert pooled["seen"] == group(2, 1, 0.5, 1, 1.0, 0.6667)
    assert pooled["unseen"] == group(3, 1, 0.3333, 4, 0.25, 0.2857)
    assert (pooled["precision"], pooled["recall"], pooled["f1"]) == (0.4, 0.4, 0.4)

    folded = mentions.recall_by_seen(gold, predicted, mentions.ignoring_case(train))
    # Ignoring case, "aspirin" counts as seen: the Chemical split moves, recall overall does not.
    assert folded["Chemical"]["seen"] == group(2, 1, 0.5, 1, 1.0, 0.6667)
    assert folded["Chemical"]["unseen"] == group(0, 0, 0.0, 1, 0.0, 0.0)
    assert folded["Chemical"]["recall"] == chemical["recall"]


def test_recall_refuses_files_of_different_lengths(mentions, files) -> None:
    gold = mentions.sentence_mentions(files["test"])
    with pytest.raises(ValueError, match="2 gold sentences but 1 predicted"):
        mentions.recall_by_seen(gold, gold[:1], set().__contains__)


def test_the_summary_has_a_row_per_corpus_and_type(mentions, files) -> None:
    train = mentions.mention_set(files["train"])
    test = [m for sentence in mentions.sentence_mentions(files["test"]) for m, _ in sentence]
    record = {
        "machine": {"date": "a date", "commit": "abc1234", "command": "scripts/bench_mentions.py"},
        "shares": {
            "tiny": {"train": "train.tsv", "test": "test.tsv", **mentions.seen_shares(train, test)}
        },
    }
    rows = [line for line in mentions.render(record).splitlines() if line.startswith("| tiny")]
    assert rows == [
        "| tiny | all | 5 | 2 | 3 | 60.0 | 40.0 | 20.0 |",
        "| tiny | Chemical | 2 | 1 | 1 | 50.0 | 0.0 | 0.0 |",
        "| tiny | Disease | 3 | 1 | 2 | 66.7 | 66.7 | 33.3 |",
    ]
