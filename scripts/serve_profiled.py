"""The service of `tagger serve` run in this process with cProfile on, for
`scripts/bench_serve.py --profile` (which starts it, loads it and reads the two profiles).

    PYTHONPATH=TREE .venv/bin/python scripts/serve_profiled.py MODEL OUT [--threads 1]

`tagger` is imported from PYTHONPATH, so the service of any source tree can be profiled. The
service is built as the command builds it (`Service`, `bind`, `server_for`, the access log on,
written to standard output); one profile covers the event loop's thread (HTTP, routing, reading
requests, JSON, batching, the access log), another the tagging thread. Both are timed in CPU
seconds of their own thread (time.thread_time), so waiting for work is not counted. On SIGINT the
service stops gracefully and OUT.loop.prof and OUT.tagging.prof are written.
"""

from __future__ import annotations

import argparse
import cProfile
import sys
import time
from pathlib import Path


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("model", type=Path)
    parser.add_argument("out", type=Path, help="prefix of the two profile files")
    parser.add_argument("--threads", type=int, default=1)
    parser.add_argument("--queue-requests", type=int, default=1024)
    args = parser.parse_args()

    from tagger.apply.tagger import PREDICT_BATCH, Tagger
    from tagger.serve.app import Service
    from tagger.serve.records import text_tagger
    from tagger.serve.server import bind, server_for
    from tagger.serve.settings import ServiceSettings

    tagger = Tagger.load(args.model, threads=args.threads)
    own = text_tagger(tagger, PREDICT_BATCH)
    tagging = cProfile.Profile(timer=time.thread_time)

    def tag_texts(texts: list[str]) -> list:
        tagging.enable()
        try:
            return own(texts)
        finally:
            tagging.disable()

    def write_line(line: str) -> None:  # as the command writes its access log
        print(line, file=sys.stdout, flush=True)

    settings = ServiceSettings(queue_requests=args.queue_requests)
    service = Service(tagger, args.model, settings, tag_texts=tag_texts, access_log=write_line)

    def listening(url: str) -> None:
        print(f"profiled service of {args.model} at {url}; pid", file=sys.stderr, flush=True)

    server, run = server_for(service, bind("127.0.0.1", 0), listening)
    loop = cProfile.Profile(timer=time.thread_time)
    loop.enable()
    try:
        run()
    except KeyboardInterrupt:  # uvicorn raises SIGINT again once it has stopped
        pass
    finally:
        loop.disable()
    loop.dump_stats(f"{args.out}.loop.prof")
    tagging.dump_stats(f"{args.out}.tagging.prof")


if __name__ == "__main__":
    main()
