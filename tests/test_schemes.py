"""Tests for tagger.data.schemes: readings checked against seqeval, hand examples and brute force."""

from __future__ import annotations

import itertools
import random
import warnings

import pytest
from seqeval.metrics.sequence_labeling import get_entities
from seqeval.scheme import BILOU, IOB1, IOB2, IOBES, IOE2, Entities

from tagger.data.schemes import (
    SCHEME_NAMES,
    Span,
    allowed_transitions,
    convert_tags,
    detect_scheme,
    ill_formed_transitions,
    labels_for_types,
    normalise_scheme_name,
    span_prefixes,
    spans_lenient,
    spans_to_tags,
    split_tag,
    tags_to_spans,
)
from tagger.errors import ConfigError, DataError

TYPES = ("PER", "LOC", "creative-work")  # one type holds a hyphen: split on the first one only


def random_tags(rng: random.Random, length: int) -> list[str]:
    """Any mix of B/I/E/S prefixes and O: mostly ill-formed in every scheme."""
    out = []
    for _ in range(length):
        prefix = rng.choice("BIESOO")
        out.append("O" if prefix == "O" else f"{prefix}-{rng.choice(TYPES)}")
    return out


def random_spans(rng: random.Random, length: int, touch: bool = True) -> list[Span]:
    """Non-overlapping spans, often touching each other (same type or not) when ``touch``."""
    spans: list[Span] = []
    i = 0
    while i < length:
        if rng.random() < 0.55:
            end = rng.randint(i + 1, min(length, i + 4))
            type_ = rng.choice(TYPES)
            if not touch and spans and spans[-1][2] == i and spans[-1][0] == type_:
                i += 1
                continue
            spans.append((type_, i, end))
            i = end
        else:
            i += 1
    return spans


def well_formed_or_not(rng: random.Random) -> list[str]:
    """Half ill-formed random tags, half well-formed IOB1/IOB2/BIOES tags."""
    length = rng.randint(0, 12)
    if rng.random() < 0.5:
        return random_tags(rng, length)
    return spans_to_tags(random_spans(rng, length), length, rng.choice(["IOB1", "IOB2", "BIOES"]))


# --- split_tag and scheme names ---------------------------------------------------------------


@pytest.mark.parametrize(
    ("tag", "expected"),
    [  # hand-written: the tag grammar in the module docstring
        ("B-PER", ("B", "PER")),
        ("O", ("O", "")),
        ("I-creative-work", ("I", "creative-work")),
        ("U-X", ("U", "X")),
        ("L-a-b-c", ("L", "a-b-c")),
    ],
)
def test_split_tag(tag: str, expected: tuple[str, str]) -> None:
    assert split_tag(tag) == expected


@pytest.mark.parametrize("tag", ["", "B", "B-", "X-PER", "O-PER", "b-per", "-PER", "BI-PER"])
def test_split_tag_rejects_malformed_tags(tag: str) -> None:
    with pytest.raises(DataError):
        split_tag(tag)


@pytest.mark.parametrize(
    ("name", "expected"),
    [("iob2", "IOB2"), ("BIO", "IOB2"), ("bio", "IOB2"), ("IOBES", "BIOES"), ("bilou", "BILOU")],
)
def test_normalise_scheme_name(name: str, expected: str) -> None:
    assert normalise_scheme_name(name) == expected


def test_unknown_scheme_name_lists_the_choices() -> None:
    with pytest.raises(ConfigError) as caught:
        normalise_scheme_name("IOB3")
    for name in SCHEME_NAMES:
        assert name in str(caught.value)


# --- the lenient reading against seqeval --------------------------------------------------------


def test_spans_lenient_matches_seqeval_get_entities() -> None:
    # Source: seqeval's default-mode entity reader, documented as compatible with the CoNLL
    # evaluation script; it returns inclusive ends, ours are exclusive.
    rng = random.Random(20240601)
    for _ in range(3000):
        tags = well_formed_or_not(rng)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            expected = [(t, s, e + 1) for t, s, e in get_entities(tags)]
        assert spans_lenient(tags) == expected, tags


@pytest.mark.parametrize(
    ("tags", "expected"),
    [
        # CoNLL scoring convention (seqeval default mode agrees): I- after O starts a span
        (["O", "I-LOC", "I-LOC"], [("LOC", 1, 3)]),
        # ... an I- at the sentence start starts a span
        (["I-LOC", "O"], [("LOC", 0, 1)]),
        # ... a change of type starts a span, even with I- on both sides
        (["I-X", "I-Y"], [("X", 0, 1), ("Y", 1, 2)]),
        # ... B- always starts a span, so B-X B-X are two spans
        (["B-X", "B-X"], [("X", 0, 1), ("X", 1, 2)]),
        # ... E- and S- close a span; the next I- starts a new one
        (["I-X", "E-X", "I-X"], [("X", 0, 2), ("X", 2, 3)]),
        (["S-X", "I-X"], [("X", 0, 1), ("X", 1, 2)]),
        # ... E- after O starts (and ends) a span
        (["O", "E-X"], [("X", 1, 2)]),
        # our documented choice: L- reads like E-, U- like S-
        (["B-X", "L-X", "I-X"], [("X", 0, 2), ("X", 2, 3)]),
        (["U-X", "U-X"], [("X", 0, 1), ("X", 1, 2)]),
        ([], []),
    ],
)
def test_spans_lenient_hand_examples(tags: list[str], expected: list[Span]) -> None:
    assert spans_lenient(tags) == expected


def test_spans_never_cross_sentences() -> None:
    # CoNLL scoring convention: each sentence is read on its own; a span open at the end of
    # one sentence does not continue into the next.
    first, second = ["O", "B-X", "I-X"], ["I-X", "O"]
    assert spans_lenient(first) == [("X", 1, 3)]
    assert spans_lenient(second) == [("X", 0, 1)]
    assert spans_lenient(first + second) == [("X", 1, 4)]  # what joining them would wrongly give


def test_tags_to_spans_checks_the_scheme_name() -> None:
    with pytest.raises(ConfigError):
        tags_to_spans(["B-X"], "IOB3")


def test_spans_lenient_rejects_unknown_prefixes() -> None:
    with pytest.raises(DataError):
        spans_lenient(["O", "Z-PER"])


# --- scheme-aware reading ----------------------------------------------------------------------

# seqeval's strict mode reads IOB1, IOB2, IOE2, IOBES and BILOU. Its IOE1 reader is left out: its
# source marks it as unable to handle some cases, and it drops a one-token E- span after O.
SEQEVAL_STRICT = {"IOB1": IOB1, "IOB2": IOB2, "IOE2": IOE2, "BIOES": IOBES, "BILOU": BILOU}


@pytest.mark.parametrize("scheme", sorted(SEQEVAL_STRICT))
def test_tags_to_spans_matches_seqeval_strict_on_well_formed_input(scheme: str) -> None:
    # Source: seqeval.scheme.Entities (strict mode), which returns half-open spans.
    rng = random.Random(sum(map(ord, scheme)))
    sequences, expected = [], []
    for _ in range(600):
        length = rng.randint(0, 12)
        spans = random_spans(rng, length)
        sequences.append(spans_to_tags(spans, length, scheme))
        expected.append(spans)
    entities = Entities(sequences, SEQEVAL_STRICT[scheme]).entities
    for tags, spans, theirs in zip(sequences, expected, entities, strict=True):
        assert ill_formed_transitions(tags, scheme) == [], tags
        assert tags_to_spans(tags, scheme) == spans
        assert [(e.tag, e.start, e.end) for e in theirs] == spans, tags


@pytest.mark.parametrize(
    ("tags", "scheme", "expected"),
    [  # hand-worked readings of the scheme definitions
        (["I-X", "I-X", "B-X", "O", "I-Y"], "IOB1", [("X", 0, 2), ("X", 2, 3), ("Y", 4, 5)]),
        (["I-X", "E-X", "I-X", "O", "I-Y"], "IOE1", [("X", 0, 2), ("X", 2, 3), ("Y", 4, 5)]),
        (["I-X", "I-X", "I-Y"], "IO", [("X", 0, 2), ("Y", 2, 3)]),
        (["E-X", "I-X", "E-X"], "IOE2", [("X", 0, 1), ("X", 1, 3)]),
        (["B-X", "L-X", "U-X"], "BILOU", [("X", 0, 2), ("X", 2, 3)]),
        # ill-formed IOB2 (I- after O): the lenient reading
        (["O", "I-X", "I-X", "B-X"], "IOB2", [("X", 1, 3), ("X", 3, 4)]),
        # ill-formed BIOES (S- of another scheme's shape inside a span): the lenient reading
        (["B-X", "S-X", "E-X"], "BIOES", [("X", 0, 1), ("X", 1, 2), ("X", 2, 3)]),
    ],
)
def test_tags_to_spans_hand_examples(tags: list[str], scheme: str, expected: list[Span]) -> None:
    assert tags_to_spans(tags, scheme) == expected


@pytest.mark.parametrize("scheme", SCHEME_NAMES)
def test_round_trip_spans_tags_spans(scheme: str) -> None:
    # Property: writing spans and reading them back gives the spans again; IO cannot mark where
    # two touching spans of one type meet, so it gets span sets without such pairs.
    rng = random.Random(sum(map(ord, scheme)) + 1)
    for _ in range(500):
        length = rng.randint(0, 12)
        spans = random_spans(rng, length, touch=scheme != "IO")
        tags = spans_to_tags(spans, length, scheme)
        assert len(tags) == length
        assert tags_to_spans(tags, scheme) == spans
        assert ill_formed_transitions(tags, scheme) == []


def test_spans_to_tags_hand_examples() -> None:
    # Hand-written from the scheme definitions: X[0,2) X[2,3) Y[3,4) in five tokens.
    spans = [("X", 2, 3), ("X", 0, 2), ("Y", 3, 4)]  # order of the input does not matter
    assert spans_to_tags(spans, 5, "IOB1") == ["I-X", "I-X", "B-X", "I-Y", "O"]
    assert spans_to_tags(spans, 5, "IOB2") == ["B-X", "I-X", "B-X", "B-Y", "O"]
    assert spans_to_tags(spans, 5, "IOE1") == ["I-X", "E-X", "I-X", "I-Y", "O"]
    assert spans_to_tags(spans, 5, "IOE2") == ["I-X", "E-X", "E-X", "E-Y", "O"]
    assert spans_to_tags(spans, 5, "BIOES") == ["B-X", "E-X", "S-X", "S-Y", "O"]
    assert spans_to_tags(spans, 5, "BILOU") == ["B-X", "L-X", "U-X", "U-Y", "O"]
    with pytest.raises(DataError, match="IO cannot separate"):
        spans_to_tags(spans, 5, "IO")
    # span_prefixes writes the same marks without the types, for callers that keep ids
    assert span_prefixes(spans, 5, "BIOES") == ["B", "E", "S", "S", "O"]
    assert span_prefixes(spans, 5, "IOB1") == ["I", "I", "B", "I", "O"]
    with pytest.raises(DataError, match="IO cannot separate"):
        span_prefixes(spans, 5, "IO")


@pytest.mark.parametrize(
    "spans",
    [
        [("X", 0, 2), ("Y", 1, 3)],  # overlap
        [("X", 0, 2), ("X", 0, 2)],  # the same span twice
        [("X", 2, 2)],  # empty
        [("X", 3, 6)],  # past the end
        [("", 0, 1)],  # no type
    ],
)
def test_spans_to_tags_rejects_bad_spans(spans: list[Span]) -> None:
    with pytest.raises(DataError):
        spans_to_tags(spans, 5, "IOB2")


def test_convert_tags_between_all_pairs_is_lossless() -> None:
    # Property: converting keeps the spans, for every ordered pair of schemes.
    rng = random.Random(11)
    for _ in range(150):
        length = rng.randint(0, 10)
        spans = random_spans(rng, length)
        touching = any(
            a[2] == b[1] and a[0] == b[0]
            for a, b in itertools.pairwise(sorted(spans, key=lambda s: s[1]))
        )
        for source in SCHEME_NAMES:
            if source == "IO" and touching:
                continue
            tags = spans_to_tags(spans, length, source)
            for target in SCHEME_NAMES:
                if target == "IO" and touching:
                    with pytest.raises(DataError, match="touching spans of one type"):
                        convert_tags(tags, source, target)
                    continue
                converted = convert_tags(tags, source, target)
                assert tags_to_spans(converted, target) == spans
                assert converted == spans_to_tags(spans, length, target)


def test_convert_tags_hand_example() -> None:
    # Hand-worked: IOB1 with a B- between two touching LOC spans, into BIOES.
    tags = ["I-LOC", "I-LOC", "B-LOC", "O", "I-PER"]
    assert convert_tags(tags, "IOB1", "BIOES") == ["B-LOC", "E-LOC", "S-LOC", "O", "S-PER"]
    assert convert_tags(tags, "IOB1", "bio") == ["B-LOC", "I-LOC", "B-LOC", "O", "B-PER"]


# --- ill-formed transitions --------------------------------------------------------------------


@pytest.mark.parametrize(
    ("tags", "scheme", "expected"),
    [  # hand-worked from the scheme definitions: (token index, words the message must contain)
        (["O", "I-LOC"], "IOB2", [(1, "I-LOC follows O; IOB2 spans start with B-")]),
        (["I-LOC"], "IOB2", [(0, "starts the sentence")]),
        (["B-X", "I-Y"], "IOB2", [(1, "I-Y follows B-X")]),
        (["B-X", "O"], "IOB1", [(0, "only marks a span starting where one of its type ends")]),
        (["I-X", "B-Y"], "IOB1", [(1, "B-Y follows I-X")]),
        (["O", "E-X"], "BIOES", [(1, "E-X follows O; BIOES spans start with B- or S-")]),
        (["B-X", "O"], "BIOES", [(0, "B-X is followed by O; BIOES spans end with E- or S-")]),
        (["B-X"], "BILOU", [(0, "B-X ends the sentence; BILOU spans end with L- or U-")]),
        (["E-X", "I-X", "E-X"], "BIOES", [(0, "E-X starts the sentence"), (1, "closes its span")]),
        (["B-X", "S-X"], "BIOES", [(1, "leaves its span open, so BIOES expects I- or E- next")]),
        (["I-X", "O"], "IOE2", [(0, "IOE2 spans end with E-")]),
        (["E-X", "O"], "IOE1", [(0, "only marks a span ending where one of its type starts")]),
        (["O", "S-X", "O"], "IOB2", [(1, "IOB2 has no S- prefix")]),
        (["B-X"], "IO", [(0, "IO has no B- prefix")]),
        (["O", "B-X", "I-X", "O", "B-Y"], "IOB2", []),
        (["I-X", "I-Y", "O"], "IO", []),
    ],
)
def test_ill_formed_transitions_hand_examples(
    tags: list[str], scheme: str, expected: list[tuple[int, str]]
) -> None:
    found = ill_formed_transitions(tags, scheme)
    assert [i for i, _ in found] == [i for i, _ in expected], found
    for (_, message), (_, words) in zip(found, expected, strict=True):
        assert words in message


def test_ill_formed_transitions_reject_unknown_prefixes() -> None:
    with pytest.raises(DataError):
        ill_formed_transitions(["Q-X"], "IOB2")


# --- CRF transition tables ---------------------------------------------------------------------

FOREIGN = {
    "IO": "B",
    "IOB1": "E",
    "IOB2": "S",
    "IOE1": "B",
    "IOE2": "S",
    "BIOES": "L",
    "BILOU": "E",
}


def _passes(tags: tuple[str, ...], labels: list[str], tables: tuple) -> bool:
    start_ok, trans_ok, end_ok = tables
    index = [labels.index(t) for t in tags]
    if not index:
        return True
    return (
        start_ok[index[0]]
        and end_ok[index[-1]]
        and all(trans_ok[a][b] for a, b in itertools.pairwise(index))
    )


def _consistent(tags: tuple[str, ...], scheme: str) -> bool:
    """Independent test of well-formedness: the scheme writes exactly these tags for their spans."""
    try:
        return spans_to_tags(tags_to_spans(tags, scheme), len(tags), scheme) == list(tags)
    except DataError:
        return False


@pytest.mark.parametrize("scheme", SCHEME_NAMES)
def test_allowed_transitions_brute_force(scheme: str) -> None:
    # Brute force: every label sequence of length <= 4 over two types (one with a hyphen) plus a
    # prefix the scheme does not use passes the tables iff it has no ill-formed transition iff
    # the scheme itself would write it.
    labels = labels_for_types(["X", "Y-Z"], scheme) + [f"{FOREIGN[scheme]}-X"]
    tables = allowed_transitions(labels, scheme)
    for length in range(5):
        for tags in itertools.product(labels, repeat=length):
            passes = _passes(tags, labels, tables)
            assert passes == (ill_formed_transitions(tags, scheme) == []), tags
            assert passes == _consistent(tags, scheme), tags


def test_allowed_transitions_shut_out_labels_of_no_scheme() -> None:
    labels = ["<pad>", "O", "B-X", "I-X", "S-X"]
    start_ok, trans_ok, end_ok = allowed_transitions(labels, "IOB2")
    # hand-worked IOB2: I-X may not start a sentence nor follow O; <pad> and S-X are not IOB2
    assert start_ok == [False, True, True, False, False]
    assert end_ok == [False, True, True, True, False]
    assert trans_ok[1] == [False, True, True, False, False]  # after O
    assert trans_ok[2] == [False, True, True, True, False]  # after B-X
    assert trans_ok[0] == [False] * 5 and [row[0] for row in trans_ok] == [False] * 5


def test_labels_for_types() -> None:
    # hand-written: O first, then every prefix of the scheme for every type, sorted
    assert labels_for_types(["PER", "creative-work", "PER"], "IOB2") == [
        "O",
        "B-PER",
        "B-creative-work",
        "I-PER",
        "I-creative-work",
    ]
    assert labels_for_types(["X"], "BILOU") == ["O", "B-X", "I-X", "L-X", "U-X"]
    assert labels_for_types([], "IO") == ["O"]


# --- detecting a file's scheme -----------------------------------------------------------------


def test_detect_scheme_only_inside_tags_is_ambiguous() -> None:
    # hand-worked: I- and O only fit IOB1, IO and IOE1 alike, and all three read them the same way
    guess = detect_scheme([["I-PER", "I-PER", "O", "I-LOC"], ["O"], ["I-X", "I-Y"]])
    assert guess.candidates == ("IOB1", "IO", "IOE1")
    assert "cannot tell" in guess.note


@pytest.mark.parametrize(
    ("sequences", "expected"),
    [  # hand-worked from the scheme definitions
        ([["B-X", "I-X", "O", "B-Y"], ["B-X"]], ("IOB2",)),
        ([["I-X", "I-X", "B-X", "O"], ["I-Y"]], ("IOB1",)),
        ([["B-X", "E-X", "S-Y", "O"]], ("BIOES",)),
        ([["B-X", "L-X", "U-Y"]], ("BILOU",)),
        ([["I-X", "E-X", "E-Y"]], ("IOE2",)),
        ([["I-X", "E-X", "I-X", "O"]], ("IOE1",)),
    ],
)
def test_detect_scheme_single_fit(sequences: list[list[str]], expected: tuple[str, ...]) -> None:
    guess = detect_scheme(sequences)
    assert guess.candidates == expected
    assert expected[0] in guess.note


def test_detect_scheme_without_spans_fits_everything() -> None:
    guess = detect_scheme(iter([["O", "O"], []]))
    assert set(guess.candidates) == set(SCHEME_NAMES)
    assert "only O" in guess.note


def test_detect_scheme_with_no_fit_names_the_nearest() -> None:
    # hand-worked: one IOB2-breaking sentence among well-formed IOB2 ones; every other scheme
    # breaks in at least two of the three sentences.
    guess = detect_scheme([["B-X", "I-X"], ["O", "I-X"], ["B-Y"]])
    assert guess.candidates == ("IOB2",)
    assert "no scheme fits" in guess.note and "sentence 2, token 2" in guess.note
