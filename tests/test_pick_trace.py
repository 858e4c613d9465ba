"""Tests for tagger.data.pick_trace: the trace line before a picked sentence reads back field for
field through the column reader, whatever the file name or document id holds."""

from __future__ import annotations

from pathlib import Path

import pytest

from tagger.data.corpus import Sentence, read_sentences, write_columns
from tagger.data.pick_trace import Trace, read_trace, trace_of

TRACES = [
    Trace(1, 3.25, "pool.txt", "pool.txt", 0, 21),
    Trace(2, 0.5, "notes/a b\tc.jsonl", 17, 5, 9),  # a TAB and a space in the name, a number id
    Trace(3, 1.0, "rapport é.txt", "doc:12 \u00a0x", 120, 184),
    Trace(4, 0.12345678, "-", None, 3, 4),
]


def test_trace_lines_read_back_through_the_column_reader(tmp_path: Path) -> None:
    sentences = [
        Sentence(
            rows=(("Anna", "B-PER"), ("met", "O"), ("Bob", "B-PER")),
            line_numbers=(),
            token_column=0,
            label_column=1,
            document=0,
            prefix_lines=(trace.line(),),
        )
        for trace in TRACES
    ]
    path = tmp_path / "picked.conll"
    write_columns(path, sentences)
    back = read_sentences(path)
    assert len(back) == len(TRACES)
    for sentence, trace in zip(back, TRACES, strict=True):
        expected = Trace(
            trace.rank, round(trace.score, 4), trace.file, trace.document, trace.start, trace.end
        )
        assert trace_of(sentence.prefix_lines) == expected
        assert sentence.tokens == ["Anna", "met", "Bob"]
        assert sentence.labels == ["B-PER", "O", "B-PER"]
    # each picked sentence is a document of its own
    assert [s.document for s in back] == list(range(len(TRACES)))


@pytest.mark.parametrize(
    "line",
    [
        "-DOCSTART-",
        "-DOCSTART- report-7",
        "-DOCSTART- picked not json",
        '-DOCSTART- picked {"rank": 1}',
        '-DOCSTART-picked {"rank": 1, "score": 1, "file": "f", "document": "d", "at": [0, 1]}',
        'Anna picked {"rank": 1, "score": 1, "file": "f", "document": "d", "at": [0, 1]}',
    ],
)
def test_other_lines_hold_no_trace(line: str) -> None:
    assert read_trace(line) is None
