"""Run the command line as `python -m tagger`."""

from tagger.cli import app

app(prog_name="tagger")
