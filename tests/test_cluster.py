"""`tag --cluster`: the workers of a Dask scheduler tag the chunks, and the output is the one
`tag` writes on one machine, byte for byte, in every output format; a worker killed mid-run costs
only its chunks; a wrong address is one line and no output; `--on-error` behaves as on one
machine. The cluster is dask's own `LocalCluster` of two worker processes on loopback."""

from __future__ import annotations

import gzip
import itertools
import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
from model_files import tiny_training_config
from typer.testing import CliRunner

from tagger.apply.tagging import TagOptions, tag_files
from tagger.cli import app
from tagger.training.loop import train

distributed = pytest.importorskip(
    "distributed", reason="dask's distributed is not installed (pip install 'tagger[cluster]')"
)

runner = CliRunner()
DEMO = Path(__file__).resolve().parents[1] / "data" / "demo"
CHUNK = "3000"  # characters: the inputs below make a few dozen chunks, the text file in pieces


@pytest.fixture(scope="module")
def model(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A tiny tagger trained on the demo's first 150 sentences (a few seconds)."""
    folder = tmp_path_factory.mktemp("model")
    sentences = (DEMO / "train.txt").read_text(encoding="utf-8").split("\n\n")[:150]
    data = folder / "train.txt"
    data.write_text("\n\n".join(sentences) + "\n\n", encoding="utf-8")
    config = tiny_training_config(data, data, epochs=2, batch_size=16, seed=3)
    return train(config, folder / "run").model_path


@pytest.fixture(scope="module")
def inputs(tmp_path_factory: pytest.TempPathFactory) -> list[str]:
    """The demo's new reports (jsonl), 300 sentences of its test split (columns) and the first
    400 lines of its unannotated text as one plain-text document (read in pieces)."""
    folder = tmp_path_factory.mktemp("inputs")
    columns = folder / "test.conll"
    sentences = (DEMO / "test.txt").read_text(encoding="utf-8").split("\n\n")[:300]
    columns.write_text("\n\n".join(sentences) + "\n\n", encoding="utf-8")
    text = folder / "notes.txt"
    with gzip.open(DEMO / "unannotated.txt.gz", "rt", encoding="utf-8") as archive:
        text.write_text("".join(itertools.islice(archive, 400)), encoding="utf-8")
    return [str(DEMO / "new_reports.jsonl"), str(columns), str(text)]


@pytest.fixture(scope="module")
def cluster():
    """Two worker processes of one thread each; shut down with their processes at the end."""
    with (
        distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
        ) as local,
        distributed.Client(local, set_as_default=False) as client,
    ):
        yield local.scheduler_address, client


def _tag(*args: str):
    return runner.invoke(app, ["tag", *args])


def _untimed(stderr: str) -> str:
    """What the command said, without the run's time and speed."""
    return re.sub(r" in [0-9.]+ s \([0-9,]+ tokens/s\)", "", stderr)


@pytest.mark.parametrize("output_format", ["jsonl", "columns", "table"])
def test_a_cluster_writes_the_bytes_of_one_machine(
    model: Path, inputs: list[str], cluster, tmp_path: Path, output_format: str
) -> None:
    address, _ = cluster
    here, there = tmp_path / "one-machine", tmp_path / "cluster"
    common = [str(model), *inputs, "--output-format", output_format, "--chunk-chars", CHUNK]
    one = _tag(*common, "--out", str(here))
    assert one.exit_code == 0, one.stderr
    spread = _tag(*common, "--out", str(there), "--cluster", address)
    assert spread.exit_code == 0, spread.stderr
    assert there.read_bytes() == here.read_bytes()
    assert len(here.read_bytes()) > 40_000  # many chunks went through the cluster
    # the same summary of what was tagged (the timing aside)
    assert _untimed(spread.stderr) == _untimed(one.stderr)


class DieOnce(distributed.WorkerPlugin):
    """Ends its worker's process, abruptly, as that worker starts on the chunk `index` of a
    run; once over the whole cluster (the first worker to create `marker` does it)."""

    def __init__(self, marker: str, index: int) -> None:
        self.marker = marker
        self.index = index

    def transition(self, key, start: str, finish: str, **kwargs) -> None:
        name = str(key)
        if not (finish == "executing" and name.endswith(f"-{self.index}")):
            return
        if not name.startswith("tagger-chunk-"):
            return
        try:
            descriptor = os.open(self.marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
        except FileExistsError:
            return
        os.write(descriptor, name.encode())
        os.close(descriptor)
        os._exit(1)


def test_a_worker_killed_mid_run_costs_only_its_chunks(
    model: Path, inputs: list[str], cluster, tmp_path: Path
) -> None:
    address, client = cluster
    options = TagOptions(chunk_chars=int(CHUNK), output_format="jsonl")
    tag_files(model, inputs, tmp_path / "one-machine.jsonl", options)

    marker = tmp_path / "died"
    pids = set(client.run(os.getpid).values())
    client.register_plugin(DieOnce(str(marker), 3), name="die-once")
    try:
        spread = TagOptions(chunk_chars=int(CHUNK), output_format="jsonl", cluster=address)
        summary = tag_files(model, inputs, tmp_path / "cluster.jsonl", spread)
    finally:
        client.unregister_worker_plugin("die-once")
    out = (tmp_path / "cluster.jsonl").read_bytes()
    assert out == (tmp_path / "one-machine.jsonl").read_bytes()
    assert summary.documents == len(out.splitlines())
    # A worker died on chunk 3, which was then tagged again by another worker ...
    lost = marker.read_text()
    started = [t for t in client.story(lost) if t[2] == "processing"]
    assert len(started) >= 2, client.story(lost)
    # ... and its nanny started a new process in its place.
    client.wait_for_workers(2, timeout=60)
    assert len(set(client.run(os.getpid).values()) - pids) == 1


def test_a_wrong_address_is_one_line_and_no_output(model: Path, tmp_path: Path) -> None:
    out = tmp_path / "out" / "tagged.jsonl"
    out.parent.mkdir()
    for address in ("tcp://127.0.0.1:9", "not an address::"):  # port 9: nothing listens there
        result = _tag(
            str(model), str(DEMO / "new_reports.jsonl"), "--out", str(out),
            "--cluster", address, "--cluster-wait", "1",
        )  # fmt: skip
        assert result.exit_code == 1, result.stderr
        assert result.stderr.startswith(
            f"tagger: error: cannot reach a Dask scheduler at '{address}'"
        )
        assert result.stderr.count("\n") == 1
        assert list(out.parent.iterdir()) == []


def test_workers_and_a_cluster_together_are_a_usage_error(model: Path) -> None:
    result = _tag(str(model), "--workers", "2", "--cluster", "tcp://127.0.0.1:9")
    assert result.exit_code == 2
    assert "workers is for one machine" in result.stderr


def test_on_error_is_that_of_one_machine(
    model: Path, inputs: list[str], cluster, tmp_path: Path
) -> None:
    address, _ = cluster
    source = tmp_path / "mixed.jsonl"
    good = [
        json.dumps({"id": f"r{i}", "text": "Replaced the pitch bearing on T-14."})
        for i in range(40)
    ]
    source.write_text("\n".join([*good[:20], '{"text": 3}', *good[20:]]) + "\n", encoding="utf-8")
    # the bad record is the 21st line, in a later chunk than the first
    args = [str(model), str(source), inputs[2], "--chunk-chars", "300"]
    for on_error in ("stop", "skip"):
        results = {}
        for name, where in (("one", []), ("cluster", ["--cluster", address])):
            out = tmp_path / on_error / name / "tagged.jsonl"
            out.parent.mkdir(parents=True)
            result = _tag(*args, "--on-error", on_error, "--out", str(out), *where)
            files = {p.name: p.read_bytes() for p in out.parent.iterdir()}
            results[name] = (result.exit_code, _untimed(result.stderr), files)
            if on_error == "stop":
                assert result.stderr.startswith(f"tagger: error: {source}:21: ")
            else:
                assert f"  skipped {source}:21: " in result.stderr
        assert results["cluster"] == results["one"]
        code, _, files = results["one"]
        assert (code, bool(files)) == ((1, False) if on_error == "stop" else (0, True))


def test_without_the_extra_the_command_says_what_to_install(
    model: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from tagger.apply import cluster as cluster_module

    monkeypatch.setattr(cluster_module, "PACKAGE", "tagger_no_such_package")
    out = tmp_path / "tagged.jsonl"
    result = _tag(str(model), str(DEMO / "new_reports.jsonl"), "-o", str(out), "--cluster", "x")
    assert result.exit_code == 1
    assert result.stderr == (
        "tagger: error: tagging on a cluster needs dask's distributed: "
        "pip install 'tagger[cluster]'\n"
    )
    assert not out.exists()


FAULTS = """
import resource
import numpy as np
from tagger.apply.cluster import _keep_freed_memory

def faults():
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    for _ in range(200):
        block = np.ones(1 << 18, dtype=np.float32)  # 1 MB, every page touched
        del block
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before

first = faults()
_keep_freed_memory()
print(first, faults())
"""


@pytest.mark.skipif(
    not sys.platform.startswith("linux"), reason="glibc's malloc settings: Linux only"
)
def test_a_worker_started_to_give_memory_back_keeps_it_for_the_next_batch() -> None:
    # A Dask nanny starts its worker with MALLOC_TRIM_THRESHOLD_ (dask's own default, read from
    # its config here rather than assumed): every 1 MB block freed goes back to the system, so
    # the next one costs fresh pages. After the worker's first chunk it stays for reuse.
    import dask

    setting = dask.config.get("distributed.nanny.pre-spawn-environ")["MALLOC_TRIM_THRESHOLD_"]
    done = subprocess.run(
        [sys.executable, "-c", FAULTS],
        capture_output=True,
        text=True,
        check=True,
        env={**os.environ, "MALLOC_TRIM_THRESHOLD_": str(setting)},
    )
    given_back, kept = map(int, done.stdout.split())
    assert given_back > 200 * 200  # 256 pages a block, each a fault
    assert kept < given_back / 20
