"""scripts/setup_env.sh decides where torch comes from: torch's CPU wheel index when it answers,
else pip's default index. These tests source the script (which then installs nothing) and run its
probe against local servers, so they need no network and install nothing."""

from __future__ import annotations

import http.server
import shutil
import socket
import subprocess
import sys
import threading
from collections.abc import Iterator
from contextlib import contextmanager, nullcontext
from pathlib import Path

import pytest

SETUP = Path(__file__).resolve().parents[1] / "scripts" / "setup_env.sh"
BASH = shutil.which("bash")
pytestmark = pytest.mark.skipif(BASH is None, reason="the set-up script needs bash")

# A guard against a probe that hangs, far above the 1 s the probe is given: a hang fails the test
# instead of stalling the suite. Nothing is asserted about how fast the probe answers.
HANG_GUARD_SECONDS = 60


def run_sourced(shell_code: str, index_url: str, wait: str = "1") -> subprocess.CompletedProcess:
    """Source setup_env.sh in a fresh bash, then run `shell_code` with the probe aimed at index_url."""
    env = {
        "PATH": "/usr/bin:/bin",
        "PYTHON": sys.executable,
        "TAGGER_TORCH_INDEX": index_url,
        "TAGGER_INDEX_WAIT": wait,
        "no_proxy": "*",
    }
    return subprocess.run(
        [BASH, "-c", f'source "{SETUP}"; {shell_code}'],
        capture_output=True,
        text=True,
        env=env,
        timeout=HANG_GUARD_SECONDS,
    )


class _Answer(http.server.BaseHTTPRequestHandler):
    status = 200

    def do_GET(self) -> None:  # noqa: N802 - the name http.server dispatches to
        self.send_response(self.status)
        self.end_headers()
        self.wfile.write(b"<html><body>torch</body></html>")

    def log_message(self, *args: object) -> None:
        pass


@contextmanager
def local_index(status: int) -> Iterator[str]:
    """An HTTP server on localhost that answers every GET with `status`."""
    handler = type("Handler", (_Answer,), {"status": status})
    server = http.server.HTTPServer(("127.0.0.1", 0), handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_address[1]}/whl/cpu/"
    finally:
        server.shutdown()
        server.server_close()


@contextmanager
def silent_listener() -> Iterator[str]:
    """A port that accepts connections but never answers: the probe has to give up by itself."""
    listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    listener.bind(("127.0.0.1", 0))
    listener.listen(8)
    try:
        yield f"http://127.0.0.1:{listener.getsockname()[1]}/whl/cpu/"
    finally:
        listener.close()


def closed_port_url() -> str:
    """A localhost URL where nothing listens (the port was bound and released)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    return f"http://127.0.0.1:{port}/whl/cpu/"


def test_an_answering_index_is_used_for_torch() -> None:
    with local_index(200) as url:
        result = run_sourced('choose_torch_index; echo "args: ${TORCH_INDEX_ARGS[*]}"', url)
    assert result.returncode == 0, result.stderr
    line, args = result.stdout.splitlines()
    assert line == f"setup: installing torch==2.13.0 from torch's CPU wheel index {url}"
    assert args == f"args: --index-url {url}"


@pytest.mark.parametrize(
    "where", ["nothing listening", "a silent listener", "an index answering 404"]
)
def test_an_index_that_does_not_answer_falls_back_to_the_default_index(where: str) -> None:
    if where == "nothing listening":
        context = nullcontext(closed_port_url())
    elif where == "a silent listener":
        context = silent_listener()
    else:
        context = local_index(404)
    with context as url:
        result = run_sourced('choose_torch_index; echo "args: [${TORCH_INDEX_ARGS[*]}]"', url)
    assert result.returncode == 0, result.stderr
    line, args = result.stdout.splitlines()
    assert line == (
        f"setup: torch's CPU wheel index {url} did not answer within 1s; "
        "installing torch==2.13.0 from pip's default index"
    )
    assert args == "args: []"


def test_the_probe_reports_success_only_for_an_answer() -> None:
    with local_index(200) as answering, silent_listener() as silent:
        result = run_sourced(
            f'index_answers "{answering}" 1; echo "answering=$?"; '
            f'index_answers "{silent}" 1; echo "silent=$?"',
            answering,
        )
    assert result.stdout.splitlines() == ["answering=0", "silent=1"]


def test_sourcing_the_script_installs_nothing(tmp_path: Path) -> None:
    # Sourced, the script must only define functions: no .venv, no pip, no change of directory.
    result = subprocess.run(
        [
            BASH,
            "-c",
            f'cd "{tmp_path}"; source "{SETUP}"; pwd; type main >/dev/null && echo defined',
        ],
        capture_output=True,
        text=True,
        env={"PATH": "/usr/bin:/bin"},
        timeout=HANG_GUARD_SECONDS,
    )
    assert result.stdout.splitlines() == [str(tmp_path), "defined"]
    assert list(tmp_path.iterdir()) == []
