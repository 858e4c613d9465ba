"""README.md's sample outputs are written by scripts/readme_samples.py between marker comments.
These tests check the markers and the script's list of blocks agree, and how blocks are found and
rewritten; whether the outputs match a run needs a trained model and is the script's own job."""

from __future__ import annotations

from pathlib import Path

import pytest

README = Path(__file__).resolve().parents[1] / "README.md"


@pytest.fixture(scope="module")
def samples(load_script):
    return load_script("readme_samples")


def begin(name: str) -> str:
    return f"<!-- sample {name}: written by scripts/readme_samples.py -->"


def end(name: str) -> str:
    return f"<!-- end sample {name} -->"


def test_the_readme_marks_exactly_the_blocks_the_script_writes(samples) -> None:
    blocks = samples.find_blocks(README.read_text(encoding="utf-8"))
    assert sorted(b.name for b in blocks) == sorted(s.name for s in samples.SAMPLES)


def test_each_readme_block_holds_its_command_and_one_code_block(samples) -> None:
    lines = README.read_text(encoding="utf-8").splitlines()
    by_name = {s.name: s for s in samples.SAMPLES}
    for block in samples.find_blocks("\n".join(lines)):
        inside = lines[block.begin + 1 : block.end]
        fences = [i for i, line in enumerate(inside) if line.startswith("```")]
        assert len(fences) == 2, f"block {block.name}: {len(fences)} fence lines"
        assert inside[fences[0]] == "```text"
        # The command line as the script shows it (`--epochs` may add a setting at the end).
        assert inside[fences[0] + 1].startswith(f"$ {samples.shown_command(by_name[block.name])}")
        assert fences[1] > fences[0] + 2, f"block {block.name} shows no output"
        assert inside[-1].startswith("<sub>Recorded by `scripts/readme_samples.py`")
        if by_name[block.name].uses_model:
            assert "with the model from `tagger train --config configs/default.toml" in inside[-1]


def test_samples_that_use_the_model_run_after_training(samples) -> None:
    names = [s.name for s in samples.SAMPLES]
    trained_at = names.index("train")
    assert all(names.index(s.name) > trained_at for s in samples.SAMPLES if s.uses_model)
    # score reads the predictions evaluate writes
    assert names.index("score") > names.index("evaluate")


TWO_BLOCKS = "\n".join(
    ["intro", begin("one"), "old one", end("one"), "middle", begin("two"), end("two"), "outro", ""]
)


def test_blocks_are_found_with_their_marker_lines(samples) -> None:
    assert samples.find_blocks(TWO_BLOCKS) == [
        samples.Block("one", 1, 3),
        samples.Block("two", 5, 6),
    ]


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("\n".join([begin("one"), "text"]), "'one' is never closed"),
        ("\n".join(["text", end("one")]), "'one' closes but was not open"),
        (
            "\n".join([begin("one"), begin("two"), end("two"), end("one")]),
            "'two' opens inside 'one'",
        ),
        ("\n".join([begin("one"), end("two")]), "'two' closes but was not open"),
        ("\n".join([begin("one"), end("one"), begin("one"), end("one")]), "more than once: one"),
        ("\n".join(["<!-- sample one -->", "<!-- end sample one -->"]), "unknown form"),
    ],
)
def test_malformed_markers_are_refused(samples, text: str, message: str) -> None:
    with pytest.raises(samples.MarkerError, match=message):
        samples.find_blocks(text)


def test_rewriting_changes_only_the_inside_of_named_blocks(samples) -> None:
    rewritten = samples.replace_blocks(TWO_BLOCKS, {"one": "new\nlines\n"})
    assert rewritten == "\n".join(
        [
            "intro",
            begin("one"),
            "new",
            "lines",
            end("one"),
            "middle",
            begin("two"),
            end("two"),
            "outro",
            "",
        ]
    )
    # Rewriting again with the same content changes nothing; an empty block can be filled.
    assert samples.replace_blocks(rewritten, {"one": "new\nlines"}) == rewritten
    filled = samples.replace_blocks(rewritten, {"two": "filled"})
    assert filled.splitlines()[6:9] == [begin("two"), "filled", end("two")]


def test_rewriting_a_block_the_text_lacks_is_refused(samples) -> None:
    with pytest.raises(samples.MarkerError, match="no block marked for: three"):
        samples.replace_blocks(TWO_BLOCKS, {"three": "x"})


def test_outputs_are_cut_as_the_shown_command_says(samples) -> None:
    sample = samples.Sample("x", ["score", "gold", "predicted"], first_lines=2)
    assert samples.shown_command(sample) == "tagger score gold predicted | head -n 2"
    assert samples.shape_output(sample, "a\nb\nc\n") == "a\nb"

    piped = samples.Sample("y", ["tokenize"], stdin="It's 92°C.\n")
    assert samples.shown_command(piped) == "echo 'It'\"'\"'s 92°C.' | tagger tokenize"

    ends = samples.Sample("z", ["train"], keep_ends=(2, 1))
    output = "\n".join(f"epoch {i}" for i in range(1, 7))
    assert samples.shape_output(ends, output) == "\n".join(
        ["epoch 1", "epoch 2", "[... 3 lines left out here ...]", "epoch 6"]
    )
    # Nothing is left out when eliding would save no more than the note's own line.
    assert samples.shape_output(ends, "a\nb\nc\nd") == "a\nb\nc\nd"


def test_tab_separated_tables_are_aligned_by_column(samples) -> None:
    sample = samples.Sample("t", ["tag"], align_tabs=True)
    table = "document\tstart\tlabel\nSR-1\t19\tCOMPONENT\nSR-22\t7\tASSET\n"
    assert samples.shape_output(sample, table).splitlines() == [
        "document  start  label",
        "SR-1      19     COMPONENT",
        "SR-22     7      ASSET",
    ]


def test_the_readme_s_first_log_example_reads_a_line_per_record(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # The README's first command on a log, run as written in a folder holding its files (a tiny
    # untrained model stands in for the demo's).
    import shlex

    from model_files import tiny_tagger
    from typer.testing import CliRunner

    from tagger.cli import app

    commands = [
        line.split("#")[0].strip()
        for line in README.read_text(encoding="utf-8").splitlines()
        if line.startswith("tagger ") and ".log" in line.split("#")[0]
    ]
    first = shlex.split(commands[0])
    assert first[1] == "tag" and "--input-format" in first
    assert first[first.index("--input-format") + 1] == "lines"
    monkeypatch.chdir(tmp_path)
    (tmp_path / first[2]).parent.mkdir(parents=True)
    tiny_tagger().save(tmp_path / first[2])
    log = [f"2026-03-0{day} pump {day} tripped on low oil pressure" for day in range(1, 6)]
    (tmp_path / first[3]).write_text("\n".join(log) + "\n", encoding="utf-8")
    result = CliRunner().invoke(app, first[1:])
    assert result.exit_code == 0, result.stderr
    assert len(result.stdout.splitlines()) == len(log)  # a record per line of the log
    assert f"tagged {len(log)} documents" in result.stderr
