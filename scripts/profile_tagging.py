"""Where `tagger tag`'s time goes: the whole command on the demo's inputs, at one thread.

Runs the command's own pipeline (`tag_files`: reading, tokenising, token ids, the character
encoder, the word network, Viterbi, CRF marginals, spans and the review flag, formatting,
writing) in this process on three inputs: the demo's new reports, the demo test split as JSONL
documents, and the first lines of the demo's unannotated corpus. Each phase is a function of the
pipeline wrapped with a clock that counts its own time (time in a wrapped function it calls is
that function's phase), so the phases add up to the run. cProfile then lists the functions with
the most own time on the largest input. Tokens/s are set beside the matrix-product ceiling
measured in the same run. Writes benchmarks/tagging_profile.{json,md}.

With `--baseline REV`, the code of the git revision REV (its `tagger` folder) is run as a child
`tagger tag` process beside this checkout's, in interleaved rounds on the largest input, and the
outputs of both on every input are compared byte for byte.

    .venv/bin/python scripts/profile_tagging.py [MODEL] [--lines 20000] [--baseline main]
"""

from __future__ import annotations

import argparse
import cProfile
import gzip
import json
import os
import pstats
import subprocess
import sys
import tarfile
import tempfile
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from statistics import median
from typing import Any

import torch

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from bench_tagging import (  # noqa: E402
    _SUMMARY,
    DEFAULT_MODEL,
    detokenise,
    ensure_model,
    write_documents,
)
from benchlib import machine, matmul_gflops, portable_path  # noqa: E402

from tagger.apply import engine, label_decoding, outputs, predict, tagging, writing  # noqa: E402
from tagger.apply.tagger import Tagger  # noqa: E402
from tagger.data.atomic import atomic_output  # noqa: E402
from tagger.data.corpus import read_sentences  # noqa: E402
from tagger.network import net  # noqa: E402

DEMO = ROOT / "data" / "demo"

# (phase, owner, attribute): the functions whose own time makes each phase, in pipeline order.
PHASES: tuple[tuple[str, Any, str], ...] = (
    ("reading", tagging, "read_documents"),
    ("tokenising", engine.Engine, "analyse"),
    ("token ids", predict, "encode_cached"),
    ("character encoder", predict, "_char_features"),
    ("word network", net.TaggerNet, "emissions"),
    ("Viterbi", net.TaggerNet, "decode"),
    ("CRF marginals", label_decoding.LabelDecoder, "marginals"),
    ("batching, scores, spans", predict, "scored_sentences"),
    ("mentions, review flag", engine.Engine, "tag"),
    ("formatting", outputs.DocumentFormatter, "chunk"),
    ("writing", writing.OutputWriter, "write"),
)


class PhaseClock:
    """Own seconds per phase: a stack of running phases, each charged only for the time no
    phase it called was running."""

    def __init__(self) -> None:
        self.spent: dict[str, float] = {name: 0.0 for name, _, _ in PHASES}
        self._stack: list[list[Any]] = []  # [phase, started, seconds in called phases]

    def enter(self, phase: str) -> None:
        self._stack.append([phase, time.perf_counter(), 0.0])

    def leave(self) -> None:
        phase, started, inner = self._stack.pop()
        seconds = time.perf_counter() - started
        self.spent[phase] += seconds - inner
        if self._stack:
            self._stack[-1][2] += seconds

    def timed(self, phase: str, function: Callable) -> Callable:
        def call(*args: Any, **kwargs: Any) -> Any:
            self.enter(phase)
            try:
                result = function(*args, **kwargs)
            finally:
                self.leave()
            if phase == "reading":  # a generator: its work happens as it is iterated
                return self.timed_iterator(phase, result)
            return result

        return call

    def timed_iterator(self, phase: str, items: Iterator) -> Iterator:
        while True:
            self.enter(phase)
            try:
                item = next(items)
            except StopIteration:
                return
            finally:
                self.leave()
            yield item


def run_once(model: Path, source: Path, out: Path, clock: PhaseClock | None = None) -> dict:
    """`tag_files` on one input at one thread, the phases clocked when `clock` is given."""
    saved = []
    if clock is not None:
        for name, owner, attribute in PHASES:
            original = getattr(owner, attribute)
            saved.append((owner, attribute, original))
            setattr(owner, attribute, clock.timed(name, original))
    try:
        options = tagging.TagOptions(threads=1)
        summary = tagging.tag_files(model, [source], out, options)
    finally:
        for owner, attribute, original in saved:
            setattr(owner, attribute, original)
    return {"tokens": summary.tokens, "seconds": summary.seconds}


def top_functions(model: Path, source: Path, out: Path, count: int = 15) -> list[dict]:
    """The functions with the most own time over one run (cProfile)."""
    profiler = cProfile.Profile()
    profiler.enable()
    run_once(model, source, out)
    profiler.disable()
    stats = pstats.Stats(profiler).stats  # type: ignore[attr-defined]
    total = sum(row[2] for row in stats.values())
    rows = sorted(stats.items(), key=lambda item: item[1][2], reverse=True)[:count]
    found = []
    for (file, line, function), (_, calls, own, _cumulative, _) in rows:
        where = f"{portable_path(file)}:{line}" if file != "~" else "built-in"
        found.append(
            {"function": function, "where": where, "calls": calls, "share": round(own / total, 3)}
        )
    return found


def inputs(folder: Path, lines: int) -> dict[str, Path]:
    """The three inputs: new reports as they are, the test split and the unannotated corpus's
    first `lines` lines as JSONL documents."""
    test = folder / "test.jsonl"
    sentences = [detokenise(s.tokens) for s in read_sentences(DEMO / "test.txt")]
    write_documents(sentences, test, sum(len(s) + 1 for s in sentences))
    corpus = folder / "unannotated.jsonl"
    with gzip.open(DEMO / "unannotated.txt.gz", "rt", encoding="utf-8") as text:
        kept = [line.strip() for line in text if line.strip()][:lines]
    corpus.write_text(
        "".join(
            json.dumps({"id": i, "text": t}, ensure_ascii=False) + "\n" for i, t in enumerate(kept)
        ),
        encoding="utf-8",
    )
    return {"new reports": DEMO / "new_reports.jsonl", "test split": test, "unannotated": corpus}


def baseline_code(revision: str, folder: Path) -> Path:
    """The `tagger` folder of git revision `revision`, extracted under `folder`."""
    archive = folder / "baseline.tar"
    subprocess.run(
        ["git", "archive", "--output", str(archive), revision, "tagger"], cwd=ROOT, check=True
    )
    code = folder / "baseline"
    with tarfile.open(archive) as tar:
        tar.extractall(code, filter="data")
    return code


def code_env(code: Path) -> dict[str, str]:
    """The environment that makes a child process import `tagger` from `code`."""
    return {**os.environ, "PYTHONPATH": str(code)}


def imported_from(code: Path, folder: Path) -> Path:
    """Where a child process started in `folder` with `code_env(code)` imports `tagger` from.
    `python -m` puts its working folder first on the path, ahead of PYTHONPATH, so a child
    started inside a checkout would run that checkout whatever PYTHONPATH says."""
    done = subprocess.run(
        [sys.executable, "-c", "import tagger; print(tagger.__file__)"],
        env=code_env(code),
        cwd=folder,
        capture_output=True,
        text=True,
        check=True,
    )
    return Path(done.stdout.strip()).resolve().parents[1]


def command_run(code: Path, model: Path, source: Path, out: Path) -> dict:
    """`tagger tag --threads 1` of the code in `code` in a child process started in the output's
    folder: the command's tokens/s end to end, and its own (from model loading on)."""
    command = [sys.executable, "-m", "tagger", "tag", str(model), str(source)]
    started = time.perf_counter()
    done = subprocess.run(
        [*command, "--out", str(out), "--threads", "1"],
        env=code_env(code),
        cwd=out.parent,
        capture_output=True,
        text=True,
    )
    seconds = time.perf_counter() - started
    if done.returncode != 0:
        raise RuntimeError(f"tagger tag failed ({done.returncode}): {done.stderr}")
    found = _SUMMARY.search(done.stderr)
    if found is None:
        raise RuntimeError(f"no summary line in: {done.stderr}")
    tokens, own_rate = (int(found.group(i).replace(",", "")) for i in (3, 4))
    return {"tokens_per_second": tokens / seconds, "after_start_up": own_rate}


def compare(revision: str, model: Path, sources: dict[str, Path], rounds: int, work: Path) -> dict:
    """Baseline and this checkout, interleaved rounds on the largest input (medians), and
    whether their outputs are the same bytes on every input."""
    model = model.resolve()  # the children run in `work`
    code = baseline_code(revision, work)
    sides = {"baseline": code, "this checkout": ROOT}
    for side, folder in sides.items():
        if imported_from(folder, work) != folder.resolve():
            raise RuntimeError(f"the {side} run would not import tagger from {folder}")
    same = {}
    for name, source in sources.items():
        written = {}
        for side, folder in sides.items():
            out = work / f"{side.replace(' ', '-')}.out"
            command_run(folder, model, source, out)
            written[side] = out.read_bytes()
        same[name] = written["baseline"] == written["this checkout"]
    largest = sources["unannotated"]
    runs: dict[str, list[dict]] = {side: [] for side in sides}
    for _ in range(rounds):
        for side, folder in sides.items():
            runs[side].append(command_run(folder, model, largest, work / "speed.out"))
    return {
        "revision": revision,
        "revision_commit": subprocess.run(
            ["git", "rev-parse", "--short", revision], cwd=ROOT, capture_output=True, text=True
        ).stdout.strip(),
        "rounds": rounds,
        "same_output": same,
        "tokens_per_second": {
            side: round(median(r["tokens_per_second"] for r in found))
            for side, found in runs.items()
        },
        "after_start_up": {
            side: round(median(r["after_start_up"] for r in found)) for side, found in runs.items()
        },
    }


def profile(model: Path, lines: int, baseline: str | None, rounds: int) -> dict:
    torch.set_num_threads(1)
    started_on = machine()
    tagger = Tagger.load(model)
    flops = tagger.net.flops_per_token()
    ceiling_before = matmul_gflops(1)
    work = Path(tempfile.mkdtemp(prefix="tagger-profile-"))
    sources = inputs(work, lines)
    measured = {}
    for name, source in sources.items():
        run_once(model, source, work / "warm.out")  # warm-up: imports, kernel choices
        clock = PhaseClock()
        run = run_once(model, source, work / "out", clock)
        total = sum(clock.spent.values())
        measured[name] = {
            "bytes": source.stat().st_size,
            "tokens": run["tokens"],
            "tokens_per_second": round(run["tokens"] / run["seconds"]),
            "phases": {k: round(v / total, 3) for k, v in clock.spent.items()},
        }
        print(json.dumps({name: measured[name]}), flush=True)
    functions = top_functions(model, sources["unannotated"], work / "out")
    ceiling = (ceiling_before + matmul_gflops(1)) / 2
    ceiling_rate = ceiling * 1e9 / flops
    for found in measured.values():
        found["ceiling_share"] = round(found["tokens_per_second"] / ceiling_rate, 3)
    result = {
        "machine": started_on,
        "model": portable_path(model),
        "flops_per_token": flops,
        "ceiling_gflops": round(ceiling, 1),
        "lines": lines,
        "inputs": measured,
        "functions": functions,
    }
    if baseline is not None:
        result["comparison"] = compare(baseline, model, sources, rounds, work)
        for side, rate in result["comparison"]["after_start_up"].items():
            result["comparison"].setdefault("ceiling_share", {})[side] = round(
                rate / ceiling_rate, 3
            )
    return result


def render(r: dict) -> str:
    m = r["machine"]
    names = list(r["inputs"])
    phases = list(next(iter(r["inputs"].values()))["phases"])
    lines = [
        "# Where `tagger tag`'s time goes",
        "",
        f"Model `{r['model']}` ({r['flops_per_token']:,} FLOPs a token for the encoder and "
        f"output layer), the command's own pipeline in one process, 1 thread, JSON Lines out; "
        f"matrix-product ceiling {r['ceiling_gflops']} GFLOP/s (1024^3 float32, measured in this "
        "run). "
        + (
            "The machine was quiet (load average under 1 before the run)."
            if m["load_before"] < 1
            else "The machine was busy: the figures are not clean, read shares and ratios."
        ),
        "",
        "| | " + " | ".join(names) + " |",
        "|---|" + "---:|" * len(names),
        "| tokens | " + " | ".join(f"{r['inputs'][n]['tokens']:,}" for n in names) + " |",
        "| tokens/s | "
        + " | ".join(f"{r['inputs'][n]['tokens_per_second']:,}" for n in names)
        + " |",
        "| share of the ceiling | "
        + " | ".join(f"{100 * r['inputs'][n]['ceiling_share']:.0f}%" for n in names)
        + " |",
        *(
            f"| {phase} | "
            + " | ".join(f"{100 * r['inputs'][n]['phases'][phase]:.0f}%" for n in names)
            + " |"
            for phase in phases
        ),
        "",
        f"Phases are the own time of the pipeline's functions (`scripts/profile_tagging.py` "
        f"names them); the test split is its sentences as JSONL documents of 2-8 sentences; "
        f"unannotated is the first {r['lines']:,} lines of `data/demo/unannotated.txt.gz`, a "
        "document each.",
        "",
        "Functions with the most own time on the unannotated input (cProfile, which slows "
        "Python code more than the native kernels, so read shares, not times):",
        "",
        "| function | where | calls | share of own time |",
        "|---|---|---:|---:|",
        *(
            f"| `{f['function']}` | {f['where']} | {f['calls']:,} | {100 * f['share']:.1f}% |"
            for f in r["functions"]
        ),
        "",
    ]
    c = r.get("comparison")
    if c is not None:
        sides = list(c["tokens_per_second"])
        lines += [
            f"## Before and after (`tagger tag --threads 1` child processes, {c['rounds']} "
            f"interleaved rounds on the unannotated input, medians; baseline `{c['revision']}` "
            f"= {c['revision_commit']})",
            "",
            "| code | tokens/s end to end | tokens/s from loading the model on | share of the "
            "ceiling |",
            "|---|---:|---:|---:|",
            *(
                f"| {side} | {c['tokens_per_second'][side]:,} | {c['after_start_up'][side]:,} "
                f"| {100 * c['ceiling_share'][side]:.0f}% |"
                for side in sides
            ),
            "",
            "The command's own rate (its summary line) starts before the model is loaded, so it "
            "counts importing torch (about a second here, a quarter of this input's run); "
            "the in-process table above has torch imported already, hence its higher share.",
            "",
            "Same output bytes as the baseline: "
            + "; ".join(f"{n}: {'yes' if same else 'NO'}" for n, same in c["same_output"].items())
            + ".",
            "",
        ]
    lines += [
        f"_{m['date']}, commit {m['commit']}; {m['cores']} cores ({m['cpu']}), torch {m['torch']}; "
        f"load average {m['load_before']} before the run; `{m['command']}`._",
        "",
    ]
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("model", nargs="?", type=Path, default=DEFAULT_MODEL)
    parser.add_argument("--lines", type=int, default=20_000, help="unannotated lines to tag")
    parser.add_argument("--epochs", type=int, default=3, help="epochs if a model must be trained")
    parser.add_argument("--baseline", help="git revision to compare with, e.g. main")
    parser.add_argument(
        "--rounds", type=int, default=3, help="interleaved rounds of the comparison"
    )
    parser.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "tagging_profile")
    args = parser.parse_args()
    model = ensure_model(args.model, DEMO, args.epochs)
    result = profile(model, args.lines, args.baseline, args.rounds)
    with atomic_output(args.out.with_suffix(".json")) as out:
        out.write(json.dumps(result, indent=2) + "\n")
    with atomic_output(args.out.with_suffix(".md")) as out:
        out.write(render(result))
    print(render(result))


if __name__ == "__main__":
    main()
