"""Tests for tagger.text.lexicon: reading lexicon files, matching, match tags; lexicon coverage in check."""

from __future__ import annotations

import importlib.util
import json
import sys
import typing
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st
from typer.testing import CliRunner

from tagger.cli import app
from tagger.config import ModelConfig, config_from_dict
from tagger.data.check import check_files
from tagger.data.schemes import spans_to_tags
from tagger.errors import DataError
from tagger.reports.check import format_check
from tagger.text.lexicon import (
    BEGIN,
    CASE_MODES,
    END,
    INSIDE,
    NO_MATCH,
    SINGLE,
    Lexicon,
    LexiconCase,
    read_lexicon,
)

ROOT = Path(__file__).resolve().parents[1]


def lexicon(*entries: str, case: str = "ignore", name: str = "parts") -> Lexicon:
    """Entries written as "tokens separated by spaces" or "tokens|TYPE"."""
    parsed = []
    for entry in entries:
        text, _, kind = entry.partition("|")
        parsed.append((text.split(" "), kind))
    return Lexicon(name, parsed, case)


def spans(lex: Lexicon, text: str) -> list[tuple[int, int, tuple[str, ...]]]:
    return lex.match(text.split(" "))


# --- reading files -------------------------------------------------------------------------------


def test_a_file_is_read_with_types_comments_and_tokenised_entries(tmp_path: Path) -> None:
    path = tmp_path / "parts.tsv"
    path.write_bytes(
        b"\xef\xbb\xbf# a catalogue\r\n"
        b"pitch bearing\tCOMPONENT\r\n"
        b"\n"
        b"oil leak, minor\tDEFECT\n"
        b"gearbox\n"
        b"  \n"
        b"T-14 brake\tCOMPONENT\n"
    )
    lex = read_lexicon(path)
    assert lex.name == "parts" and lex.types == ("", "COMPONENT", "DEFECT")
    assert lex.categories == ["parts", "parts/COMPONENT", "parts/DEFECT"]
    # Entries are cut by tagger.text.tokenizer.tokenize, as tagging cuts text: the comma stands alone,
    # "T-14" stays whole (hand-worked from the tokeniser's rules).
    assert lex.entries == [
        (("pitch", "bearing"), "COMPONENT"),
        (("oil", "leak", ",", "minor"), "DEFECT"),
        (("gearbox",), ""),
        (("T-14", "brake"), "COMPONENT"),
    ]


@pytest.mark.parametrize(
    ("content", "line", "fragment"),
    [
        (b"gearbox\tCOMPONENT\textra\n", 1, "3 TAB-separated fields"),
        (b"gearbox\n\nbrake\t \n", 3, "empty type"),
        (b"ok\ncaf\xe9\n", 2, "not valid UTF-8"),
        (b"# only a comment\n\n", None, "no entries"),
    ],
)
def test_bad_lexicon_lines_name_file_and_line(
    tmp_path: Path, content: bytes, line: int | None, fragment: str
) -> None:
    path = tmp_path / "bad.tsv"
    path.write_bytes(content)
    with pytest.raises(DataError) as error:
        read_lexicon(path)
    assert error.value.path == str(path) and error.value.line == line
    assert fragment in str(error.value)


def test_config_and_lexicon_agree_on_case_modes() -> None:
    # One source: the config's key takes exactly the lexicon's modes.
    assert typing.get_type_hints(ModelConfig)["lexicon_case"] is LexiconCase
    assert tuple(LexiconCase) == CASE_MODES
    for mode in CASE_MODES:
        assert config_from_dict({"model": {"lexicon_case": mode}}).model.lexicon_case == mode


# --- matching ------------------------------------------------------------------------------------


def test_multi_token_entries_match_token_sequences() -> None:
    lex = lexicon("pitch bearing|COMPONENT", "oil leak|DEFECT", "gearbox|COMPONENT")
    # Hand-worked.
    assert spans(lex, "oil leak at the pitch bearing near the gearbox") == [
        (0, 2, ("DEFECT",)),
        (4, 6, ("COMPONENT",)),
        (8, 9, ("COMPONENT",)),
    ]
    assert spans(lex, "pitch and bearing , oil") == []  # pieces of entries do not match


@pytest.mark.parametrize(
    ("entries", "text", "expected"),
    [  # hand-worked: the longest occurrence wins, overlapping shorter ones are dropped
        (["main bearing", "main bearing seal"], "the main bearing seal", [(1, 4)]),
        (["main bearing", "bearing seal housing"], "main bearing seal housing", [(1, 4)]),
        # A chosen long match blocks a short one inside it, but not one beside it.
        (["bearing", "main bearing", "seal"], "main bearing seal", [(0, 2), (2, 3)]),
        # Equal lengths: the leftmost first.
        (["a b", "b c"], "a b c", [(0, 2)]),
        (["a b", "b c"], "x b c a b", [(1, 3), (3, 5)]),
        # The longest is chosen even when it starts later than a shorter overlapping one.
        (["a b", "b c d"], "a b c d", [(1, 4)]),
    ],
)
def test_overlapping_matches_are_chosen_longest_first(
    entries: list[str], text: str, expected: list[tuple[int, int]]
) -> None:
    assert [(a, b) for a, b, _ in spans(lexicon(*entries), text)] == expected


@pytest.mark.parametrize(
    ("case", "entries", "text", "expected"),
    [  # hand-worked
        ("exact", ["gearbox", "UPS"], "Gearbox gearbox UPS ups", [(1, 2), (2, 3)]),
        ("ignore", ["gearbox", "UPS"], "Gearbox gearbox UPS ups", [(0, 1), (1, 2), (2, 3), (3, 4)]),
        ("smart", ["gearbox", "UPS"], "GEARBOX Gearbox UPS ups", [(0, 1), (1, 2), (2, 3)]),
        ("smart", ["DC link capacitor"], "dc link capacitor DC LINK capacitor", []),
        ("smart", ["DC link capacitor"], "the DC link capacitor", [(1, 4)]),
        ("ignore", ["Straße"], "STRASSE strasse", [(0, 1), (1, 2)]),  # str.casefold's rule
    ],
)
def test_case_modes(
    case: str, entries: list[str], text: str, expected: list[tuple[int, int]]
) -> None:
    assert [(a, b) for a, b, _ in spans(lexicon(*entries, case=case), text)] == expected


def test_an_entry_listed_with_two_types_marks_both() -> None:
    lex = lexicon("brake|COMPONENT", "brake|DEFECT", "brake disc|COMPONENT", "rust")
    assert lex.categories == ["parts", "parts/COMPONENT", "parts/DEFECT"]
    assert spans(lex, "brake rust brake disc") == [
        (0, 1, ("COMPONENT", "DEFECT")),
        (1, 2, ("",)),
        (2, 4, ("COMPONENT",)),
    ]
    untyped, component, defect = lex.tags(["brake", "rust", "brake", "disc"])
    assert untyped == [NO_MATCH, SINGLE, NO_MATCH, NO_MATCH]
    assert component == [SINGLE, NO_MATCH, BEGIN, END]
    assert defect == [SINGLE, NO_MATCH, NO_MATCH, NO_MATCH]


def test_match_tags_are_the_bioes_tags_of_the_matches() -> None:
    lex = lexicon("a|X", "b c|X", "c d e f|Y", "g|Y")
    tokens = ["a", "b", "c", "d", "e", "f", "g", "a", "b", "c"]
    prefix = {NO_MATCH: "O", BEGIN: "B", INSIDE: "I", END: "E", SINGLE: "S"}
    for kind, ids in zip(lex.types, lex.tags(tokens), strict=True):
        chosen = [(kind, a, b) for a, b, types in lex.match(tokens) if kind in types]
        # schemes.spans_to_tags in BIOES is the reference writing of spans as tags.
        expected = [tag.split("-")[0] for tag in spans_to_tags(chosen, len(tokens), "BIOES")]
        assert [prefix[i] for i in ids] == expected
    assert lex.tags([]) == [[], []]


def test_match_tags_hand_example_with_touching_matches() -> None:
    # Hand-written BIOES: a three-token match, a one-token match touching it, a lone one.
    lex = lexicon("a b c|X", "d|X")
    (tags,) = lex.tags(["a", "b", "c", "d", "x", "d"])
    assert tags == [BEGIN, INSIDE, END, SINGLE, NO_MATCH, SINGLE]


_WORDS = ["a", "b", "c", "A", "B"]


@given(
    st.lists(st.lists(st.sampled_from(_WORDS), min_size=1, max_size=3), max_size=8),
    st.lists(st.sampled_from(_WORDS), max_size=12),
    st.sampled_from(CASE_MODES),
)
def test_hashed_lookup_finds_what_a_scan_over_the_entries_finds(
    entries: list[list[str]], tokens: list[str], case: str
) -> None:
    lex = Lexicon("L", [(e, "T") for e in entries], case)

    def same(entry: list[str], piece: list[str]) -> bool:
        ignore = case == "ignore" or (
            case == "smart" and not any(c.isupper() for c in "".join(entry))
        )
        return (
            [t.casefold() for t in entry] == [t.casefold() for t in piece]
            if ignore
            else entry == piece
        )

    # Brute force (reference): try every entry at every position.
    expected = sorted(
        {
            (start, start + len(entry))
            for entry in entries
            for start in range(len(tokens) - len(entry) + 1)
            if same(entry, tokens[start : start + len(entry)])
        }
    )
    assert [(a, b) for a, b, _ in lex.find(tokens)] == expected
    chosen = lex.match(tokens)
    covered = [i for a, b, _ in chosen for i in range(a, b)]
    assert len(covered) == len(set(covered))  # chosen matches never overlap
    assert {(a, b) for a, b, _ in chosen} <= set(expected)


def test_a_lexicon_survives_its_dict_form() -> None:
    lex = lexicon("pitch bearing|COMPONENT", "UPS|COMPONENT", "leak", case="smart")
    again = Lexicon.from_dict(json.loads(json.dumps(lex.to_dict())))
    tokens = ["ups", "UPS", "pitch", "BEARING", "leak"]
    assert again.entries == lex.entries and again.case == "smart"
    assert again.tags(tokens) == lex.tags(tokens)


# --- coverage in check ---------------------------------------------------------------------------

GOLD = (
    "the\tO\npitch\tB-COMP\nbearing\tI-COMP\nseal\tI-COMP\nleaked\tO\n\n"  # partly matched
    "oil\tB-DEF\nleak\tI-DEF\non\tO\nT-14\tB-ASSET\n\n"  # exactly matched; missed
    "main\tB-COMP\nshaft\tI-COMP\nand\tO\ngearbox\tO\n\n"  # exactly, with another type; outside
)


def test_check_reports_lexicon_coverage_of_the_gold_spans(tmp_path: Path) -> None:
    data = tmp_path / "gold.txt"
    data.write_text(GOLD)
    lex = lexicon("pitch bearing|COMP", "oil leak|DEF", "main shaft|PART", "gearbox|COMP")
    (entry,) = check_files([data], lexicons=[lex])["files"]
    (coverage,) = entry["lexicon_coverage"]
    # Hand-worked: 4 gold spans; "oil leak" and "main shaft" matched exactly (the latter under
    # another type), "pitch bearing seal" only in part, "T-14" not at all; of the 4 matches,
    # "gearbox" lies outside every gold span.
    assert coverage == {
        "lexicon": "parts",
        "entries": 4,
        "spans": 4,
        "exact": 2,
        "exact_same_type": 1,
        "partial": 1,
        "none": 1,
        "matches": 4,
        "matches_outside_spans": 1,
        "per_type": {
            "ASSET": {"spans": 1, "exact": 0, "exact_same_type": 0, "partial": 0, "none": 1},
            "COMP": {"spans": 2, "exact": 1, "exact_same_type": 0, "partial": 1, "none": 0},
            "DEF": {"spans": 1, "exact": 1, "exact_same_type": 1, "partial": 0, "none": 0},
        },
    }
    text = format_check(check_files([data], lexicons=[lex]))
    assert "covers 2 of 4 gold spans exactly (50.0%; 1 with the same type)" in text


def test_check_command_takes_lexicons(tmp_path: Path) -> None:
    data = tmp_path / "gold.txt"
    data.write_text(GOLD)
    path = tmp_path / "parts.tsv"
    path.write_text("pitch bearing\tCOMP\noil leak\tDEF\n")
    runner = CliRunner()
    result = runner.invoke(app, ["check", str(data), "--lexicon", str(path), "--json"])
    assert result.exit_code == 0, result.stderr
    (coverage,) = json.loads(result.stdout)["files"][0]["lexicon_coverage"]
    assert (coverage["exact"], coverage["partial"], coverage["none"]) == (1, 1, 2)
    bad_case = runner.invoke(
        app, ["check", str(data), "--lexicon", str(path), "--lexicon-case", "x"]
    )
    assert bad_case.exit_code == 2
    path.write_text("a\tb\tc\n")
    broken = runner.invoke(app, ["check", str(data), "--lexicon", str(path)])
    assert broken.exit_code == 1 and f"{path}:1" in broken.stderr


# --- the demo lexicon ----------------------------------------------------------------------------


def test_the_demo_lexicon_is_regenerated_byte_for_byte(tmp_path: Path) -> None:
    spec = importlib.util.spec_from_file_location(
        "make_demo_data", ROOT / "scripts" / "make_demo_data.py"
    )
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    entries, held = module.demo_lexicon()
    shipped = ROOT / "data" / "demo" / "lexicon.tsv"
    assert module.format_lexicon(entries) == shipped.read_text(encoding="utf-8")
    lex = read_lexicon(shipped)
    assert set(lex.types) == {"COMPONENT", "DEFECT"}
    # Some names are withheld from train: the lexicon knows names only dev and test hold.
    assert 0 < sum(name in held for name, _ in entries) < len(entries)
