"""The sample outputs in README.md, recorded from a real run so that they cannot drift from the code.

Each sample sits between two HTML comments in README.md,

    <!-- sample NAME: written by scripts/readme_samples.py -->
    ...
    <!-- end sample NAME -->

and everything between them is rewritten from what the command printed. This script trains the demo
model into runs/readme (configs/default.toml, one thread; `--epochs N` shortens the schedule for a
quick look), then runs each command from the project folder, as a user would type it, and rewrites
the blocks. Every block names its command, and those that use the model name the training command.

    .venv/bin/python scripts/readme_samples.py             # train, run, rewrite README.md
    .venv/bin/python scripts/readme_samples.py --epochs 3  # the same with a 3-epoch model
    .venv/bin/python scripts/readme_samples.py --only tokenize check   # just these blocks
    .venv/bin/python scripts/readme_samples.py --list      # the blocks this script writes
"""

from __future__ import annotations

import argparse
import os
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path
from typing import NamedTuple

ROOT = Path(__file__).resolve().parents[1]
README = ROOT / "README.md"
RUN = "runs/readme"  # the model's folder, relative to the project folder; emptied before training
MODEL = f"{RUN}/model.tagger"
TRAINED_BY = ROOT / RUN / "trained-by.txt"  # the training command, read by later --only runs
PREDICTED = f"{RUN}/test.predicted.txt"
TRAIN_ARGS = [
    "train", "--config", "configs/default.toml", "--train", "data/demo/train.txt",
    "--dev", "data/demo/dev.txt", "--out", RUN, "--overwrite", "--set", "train.threads=1",
]  # fmt: skip
TOKENIZE_TEXT = "Yaw drive motor overheating on T-3; reading 92°C at 1,450 rpm. Fan replaced."

BEGIN = re.compile(r"^<!-- sample ([a-z0-9-]+): written by scripts/readme_samples\.py -->$")
END = re.compile(r"^<!-- end sample ([a-z0-9-]+) -->$")
ANY_MARKER = re.compile(r"^<!-- (end )?sample\b")


class Sample(NamedTuple):
    name: str
    args: list[str]  # the tagger subcommand and its arguments
    uses_model: bool = False
    stream: str = "stdout"  # which stream holds the sample (train reports on stderr)
    stdin: str | None = None  # text piped into the command
    first_lines: int | None = None  # keep only the first lines, shown as `| head -n N`
    keep_ends: tuple[int, int] | None = None  # keep the first and last lines, the middle elided
    align_tabs: bool = False  # a tab-separated table, aligned here for reading


# In the order they run (evaluate writes the predictions that score reads).
SAMPLES = [
    Sample("check", ["check", "data/demo/train.txt", "data/demo/test.txt"]),
    Sample("train", TRAIN_ARGS, stream="stderr", keep_ends=(3, 4)),
    Sample(
        "evaluate",
        ["evaluate", MODEL, "data/demo/test.txt", "--predictions", PREDICTED],
        uses_model=True,
    ),
    Sample("score", ["score", "data/demo/test.txt", PREDICTED], uses_model=True, first_lines=13),
    Sample(
        "tag-jsonl",
        ["tag", MODEL, "data/demo/new_reports.jsonl"],
        uses_model=True,
        first_lines=1,
    ),
    Sample(
        "tag-table",
        ["tag", MODEL, "data/demo/new_reports.jsonl", "--output-format", "table"],
        uses_model=True,
        align_tabs=True,
    ),
    Sample("tokenize", ["tokenize"], stdin=TOKENIZE_TEXT + "\n", align_tabs=True),
]


class Block(NamedTuple):
    name: str
    begin: int  # index of the opening marker's line
    end: int  # index of the closing marker's line


class MarkerError(ValueError):
    """README.md's sample markers are not well formed."""


# --- the markers -----------------------------------------------------------------------------------


def find_blocks(text: str) -> list[Block]:
    """The marked blocks of `text`, in order. Raises MarkerError for an unclosed, unopened, nested,
    mismatched or repeated block, or a marker line this script would not recognise."""
    blocks: list[Block] = []
    open_name, open_line = None, -1
    for number, line in enumerate(text.splitlines()):
        begin, end = BEGIN.match(line), END.match(line)
        if begin:
            if open_name is not None:
                raise MarkerError(
                    f"line {number + 1}: block {begin[1]!r} opens inside {open_name!r}"
                )
            open_name, open_line = begin[1], number
        elif end:
            if open_name != end[1]:
                raise MarkerError(f"line {number + 1}: block {end[1]!r} closes but was not open")
            blocks.append(Block(open_name, open_line, number))
            open_name = None
        elif ANY_MARKER.match(line):
            raise MarkerError(f"line {number + 1}: a sample marker in an unknown form: {line!r}")
    if open_name is not None:
        raise MarkerError(f"line {open_line + 1}: block {open_name!r} is never closed")
    names = [b.name for b in blocks]
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise MarkerError(f"blocks marked more than once: {', '.join(repeated)}")
    return blocks


def replace_blocks(text: str, contents: dict[str, str]) -> str:
    """`text` with the inside of each named block replaced; the markers and all else stay."""
    lines = text.splitlines(keepends=True)
    blocks = find_blocks(text)
    unknown = sorted(set(contents) - {b.name for b in blocks})
    if unknown:
        raise MarkerError(f"no block marked for: {', '.join(unknown)}")
    for block in reversed(blocks):  # from the end, so earlier line numbers stay valid
        if block.name in contents:
            inside = contents[block.name].rstrip("\n") + "\n"
            lines[block.begin + 1 : block.end] = [inside]
    return "".join(lines)


# --- running the commands ------------------------------------------------------------------------


def shown_command(sample: Sample) -> str:
    """The command as a user would type it in the project folder."""
    command = "tagger " + shlex.join(sample.args)
    if sample.stdin is not None:
        command = f"echo {shlex.quote(sample.stdin.rstrip(chr(10)))} | {command}"
    if sample.first_lines:
        command += f" | head -n {sample.first_lines}"
    return command


def aligned(table: str) -> str:
    rows = [line.split("\t") for line in table.splitlines()]
    widths = [max(len(row[i]) for row in rows if i < len(row)) for i in range(max(map(len, rows)))]
    return "\n".join(
        "  ".join(cell.ljust(width) for cell, width in zip(row, widths, strict=False)).rstrip()
        for row in rows
    )


def shape_output(sample: Sample, output: str) -> str:
    lines = output.rstrip("\n").splitlines()
    if sample.first_lines:
        lines = lines[: sample.first_lines]
    if sample.keep_ends and len(lines) > sum(sample.keep_ends) + 1:
        head, tail = sample.keep_ends
        left_out = len(lines) - head - tail
        lines = [*lines[:head], f"[... {left_out} lines left out here ...]", *lines[-tail:]]
    text = "\n".join(lines)
    return aligned(text) if sample.align_tabs else text


def render_block(sample: Sample, output: str, training: str) -> str:
    """The inside of a block: the command and its output in a code block, then where it came from."""
    note = "Recorded by `scripts/readme_samples.py`"
    if sample.uses_model:
        note += f", with the model from `{training}`"
    if sample.align_tabs:
        note += "; tab-separated, aligned here for reading"
    return "\n".join(
        [
            "```text",
            f"$ {shown_command(sample)}",
            shape_output(sample, output),
            "```",
            "",
            f"<sub>{note}.</sub>",
        ]
    )


def run_sample(sample: Sample) -> str:
    """Run one command from the project folder with this checkout's code; its output as text."""
    environment = {**os.environ, "NO_COLOR": "1", "PYTHONPATH": str(ROOT)}
    print(f"$ {shown_command(sample)}", file=sys.stderr, flush=True)
    result = subprocess.run(
        [sys.executable, "-m", "tagger", *sample.args],
        cwd=ROOT,
        input=sample.stdin,
        capture_output=True,
        text=True,
        env=environment,
    )
    if result.returncode != 0:
        sys.exit(f"`{shown_command(sample)}` failed ({result.returncode}):\n{result.stderr}")
    return result.stdout if sample.stream == "stdout" else result.stderr


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--epochs", type=int, help="train at most this many epochs (a quick look)")
    parser.add_argument(
        "--only",
        nargs="+",
        choices=[s.name for s in SAMPLES],
        help="rewrite only these blocks; without train among them the model of the last run is used",
    )
    parser.add_argument("--list", action="store_true", help="list the blocks and stop")
    args = parser.parse_args()
    if args.list:
        for sample in SAMPLES:
            print(f"{sample.name}\t{shown_command(sample)}")
        return 0

    text = README.read_text(encoding="utf-8")
    missing = sorted({s.name for s in SAMPLES} - {b.name for b in find_blocks(text)})
    if missing:
        sys.exit(f"README.md has no block marked for: {', '.join(missing)}")
    samples = [
        s._replace(args=[*s.args, "--set", f"train.epochs={args.epochs}"])
        if s.name == "train" and args.epochs
        else s
        for s in SAMPLES
        if not args.only or s.name in args.only
    ]
    trains = any(s.name == "train" for s in samples)
    if trains:
        training = shown_command(next(s for s in samples if s.name == "train"))
        shutil.rmtree(ROOT / RUN, ignore_errors=True)  # a fresh model, never a resumed one
    elif TRAINED_BY.exists():
        training = TRAINED_BY.read_text(encoding="utf-8").strip()
    elif any(s.uses_model for s in samples):
        sys.exit(f"no model from an earlier run in {RUN}: include train in --only")
    else:
        training = ""
    contents = {}
    for sample in samples:
        contents[sample.name] = render_block(sample, run_sample(sample), training)
        if sample.name == "train":  # which command made the model, for later --only runs
            TRAINED_BY.write_text(training + "\n", encoding="utf-8")
    README.write_text(replace_blocks(text, contents), encoding="utf-8")
    print(f"rewrote {len(contents)} blocks in README.md", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
