"""Serving one model over HTTP: a small JSON API that tags texts as `tagger tag` does.

    settings.py   the service's limits and batching settings, checked once
    extra.py      whether the `serve` extra is installed, and what to install if not
    requests.py   a tag request's body -> texts and options, every refusal naming its field
    batching.py   micro-batching: requests arriving together are tagged in one batch, in a
                  worker thread, behind a bounded queue
    records.py    what the service answers: a document's record, the model's description
    app.py        the routes and their JSON answers (starlette)
    access_log.py one Common Log Format line per request
    server.py     listening on a socket and stopping gracefully (uvicorn)

Needs the `serve` extra (starlette, uvicorn; its httptools and uvloop are used when installed and
not required); only `app.py` and `server.py` import them, and only the `serve` command imports
those. May import `tagger.apply` and everything below it.
"""
