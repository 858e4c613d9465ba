"""Plain text read in bounded pieces: the pieces join into the decoded file, and their tokens and
sentences, offsets included, are those of the whole text (tagger.apply.plaintext, data.io)."""

from __future__ import annotations

import io
import random

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import tagger.apply.plaintext as plaintext
from tagger.apply.plaintext import document_sentences, text_pieces
from tagger.data.io import decode_line, decoded_blocks, raw_lines
from tagger.errors import DataError
from tagger.text.tokenizer import TokenizerSettings

SETTINGS = TokenizerSettings()

# Pieces of text that exercise the tokenizer's rules at a cut: sentence ends, abbreviations,
# closers, line breaks of both kinds, blank lines, multi-byte characters and marks.
_PIECES = ["Crew", "B", "replaced", "the", "gearbox", "on", "T-14", ".", "etc.", "Dr.", "e.g.",
           "U.S.", "x", "é", "🙂", "...", "?", "!", '"', ")", "(", "mm/s", "7.2", ",", "wait",
           "What", "'s", "\u200b", "—", "日本", "\n", "\n\n", "\r\n", "\r\n\r\n", "\n \n",
           " ", "  ", "\t"]  # fmt: skip

_TEXTS = st.lists(
    st.tuples(st.sampled_from(_PIECES), st.sampled_from(["", " ", " ", "\n"])), max_size=150
).map(lambda pairs: "".join(a + b for a, b in pairs))


def _pieces(text: str, size: int, line_breaks: bool, bom: bool = False) -> list:
    data = ("\ufeff" if bom else "") + text
    return list(text_pieces(io.BytesIO(data.encode()), "t.txt", size, SETTINGS, line_breaks))


def _tokens_by_sentence(text: str, line_breaks: bool, offset: int = 0) -> list:
    return [
        [(t.text, offset + shift + t.start, offset + shift + t.end) for t in sentence.tokens]
        for shift, sentence in document_sentences(text, SETTINGS, line_breaks)
    ]


def _check_pieces(text: str, size: int, line_breaks: bool, bom: bool = False) -> list:
    pieces = _pieces(text, size, line_breaks, bom)
    assert "".join(p.text for p in pieces) == text  # the byte-order mark is not text
    assert [p.last for p in pieces] == [False] * (len(pieces) - 1) + [True]
    for piece in pieces:
        assert piece.text == text[piece.offset : piece.offset + len(piece.text)]
        assert piece.line == text.count("\n", 0, piece.offset) + 1
    streamed = [s for p in pieces for s in _tokens_by_sentence(p.text, line_breaks, p.offset)]
    assert streamed == _tokens_by_sentence(text, line_breaks)
    return pieces


@settings(max_examples=150)
@given(_TEXTS, st.integers(1, 90), st.booleans(), st.booleans())
def test_pieces_tokenize_as_the_whole_text(
    text: str, size: int, line_breaks: bool, bom: bool
) -> None:
    _check_pieces(text, size, line_breaks, bom)


@settings(max_examples=150)
@given(_TEXTS, st.integers(1, 90), st.booleans())
def test_pieces_tokenize_as_the_whole_text_with_a_short_search(
    text: str, size: int, line_breaks: bool
) -> None:
    # A search window of a few characters starts mid-text: the sentence search must begin at a
    # separator and still only cut where the whole text has a boundary; a short growth room
    # makes a text without a place to cut stop rather than cut a sentence in two.
    saved = plaintext.SEARCH_CHARS, plaintext.SENTENCE_ROOM
    plaintext.SEARCH_CHARS, plaintext.SENTENCE_ROOM = 10, 40
    try:
        _check_pieces(text, size, line_breaks)
    except DataError as error:
        assert "no sentence end or" in error.message and error.path == "t.txt"
    finally:
        plaintext.SEARCH_CHARS, plaintext.SENTENCE_ROOM = saved


def _prose(seed: int, sentences: int, paragraph_break: str) -> str:
    rng = random.Random(seed)
    words = ["crew", "gearbox", "bearing", "T-14", "pitch", "yaw", "drive", "7.2", "mm/s", "é"]
    out = []
    for number in range(sentences):
        words_here = " ".join(rng.choice(words) for _ in range(rng.randint(3, 12)))
        out.append(f"Crew {number} checked the {words_here}.")
        out.append(paragraph_break if rng.random() < 0.2 else " ")
    return "".join(out)


@pytest.mark.parametrize("paragraph_break", ["\n\n", "\r\n\r\n", "\n"])
def test_pieces_stay_within_their_size_and_cut_mid_paragraph(paragraph_break: str) -> None:
    text = _prose(1, 400, paragraph_break)
    pieces = _check_pieces(text, 500, line_breaks=False)
    assert len(pieces) > 40
    assert max(len(p.text) for p in pieces) <= 500
    # Paragraphs here are longer than a piece now and then: some cuts fall mid-paragraph, at a
    # sentence start right after ". ".
    mid = [p for p in pieces[1:] if not text[: p.offset].endswith(paragraph_break.strip(" "))]
    assert mid and all(text[p.offset - 2 : p.offset] == ". " for p in mid)


def test_a_line_break_ends_pieces_and_sentences_in_sentence_lines() -> None:
    text = "Crew A checked T-14 and\nthe gearbox on T-3\r\nwas fine. Yes\n"
    assert [len(s) for s in _tokens_by_sentence(text, line_breaks=True)] == [5, 4, 3, 1]
    assert [len(s) for s in _tokens_by_sentence(text, line_breaks=False)] == [12, 1]
    pieces = _check_pieces(text, 10, line_breaks=True)
    assert [p.text for p in pieces] == [
        "Crew A checked T-14 and\n",
        "the gearbox on T-3\r\n",
        "was fine. Yes\n",
    ]
    assert [p.line for p in pieces] == [1, 2, 3]


class _Counting(io.BytesIO):
    """A byte stream that remembers how far it has been read."""

    def __init__(self, data: bytes) -> None:
        super().__init__(data)
        self.furthest = 0

    def read(self, size: int | None = -1) -> bytes:
        data = super().read(size)
        self.furthest = max(self.furthest, self.tell())
        return data


def test_a_long_text_is_not_read_whole() -> None:
    text = _prose(2, 20_000, "\n\n")  # about 1.5 MB
    stream = _Counting(text.encode())
    pieces = text_pieces(stream, "t.txt", 10_000, SETTINGS)
    first = next(pieces)
    assert 0 < len(first.text) <= 10_000
    assert stream.furthest < 200_000 < len(text)
    assert first.text + "".join(p.text for p in pieces) == text


def test_no_place_to_cut_stops_with_the_line_and_the_line_inputs() -> None:
    head = "Crew A left.\n\n"
    text = head + "word " * 30_000  # no sentence end, no blank line
    with pytest.raises(DataError) as caught:
        _pieces(text, 1_000, line_breaks=False)
    error = caught.value
    assert error.path == "t.txt" and error.line == 3
    assert "no sentence end or blank line" in error.message
    assert "--input-format lines" in error.message and "sentence-lines" in error.message


@pytest.mark.parametrize("block", [1, 2, 3, 5, 64])
def test_decoded_blocks_join_into_the_decoded_input(block: int) -> None:
    text = "é🙂\r\nline two 日本\n\nthird ünïcode\u2028x\r\n"
    data = b"\xef\xbb\xbf" + text.encode()
    reads = list(decoded_blocks(io.BytesIO(data), "t.txt", block))
    assert "".join(t for _, t in reads) == text
    assert all(line == text.count("\n", 0, len("".join(t for _, t in reads[:i]))) + 1
               for i, (line, _) in enumerate(reads))  # fmt: skip


@pytest.mark.parametrize("block", [1, 4, 64])
def test_bytes_that_are_not_utf8_are_reported_as_the_line_reader_reports_them(block: int) -> None:
    data = "first é line\r\nsecond\n".encode() + b"the caf\xe9 crew\n" + b"last\n"
    with pytest.raises(DataError) as streamed:
        for _ in decoded_blocks(io.BytesIO(data), "t.txt", block):
            pass
    with pytest.raises(DataError) as by_line:
        for line in raw_lines(io.BytesIO(data)):
            decode_line(line, "t.txt")
    assert streamed.value.line == by_line.value.line == 3
    assert str(streamed.value).startswith("t.txt:3: bytes b'\\xe9' at byte offset 29 ")
    if block > 16:  # the whole line in one read: the same bytes around it
        assert streamed.value.message == by_line.value.message


def test_a_character_cut_at_the_end_of_the_input_is_reported() -> None:
    with pytest.raises(DataError) as caught:
        list(decoded_blocks(io.BytesIO(b"ok\n" + "é".encode()[:1]), "t.txt", 2))
    assert caught.value.line == 2 and "byte offset 3 " in caught.value.message
