"""A tag request's body -> `TagRequest`, or `RequestRefused` naming the field that is wrong.

The body is one JSON object encoded in UTF-8:

    {"texts": ["Anna met Bob in Oslo.", "..."], "min_score": 0.5, "review_below": 0.8}

"texts" is required (a list of 1 to `max_texts` strings, each at most `max_text_chars` code
points); "min_score" and "review_below" are optional numbers in [0, 1] with the `tag` command's
meanings and defaults. Any other key is refused, so a misspelt option is not silently ignored.
Nothing here needs the web framework: the app hands over the bytes it read.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any

from tagger.apply.review import REVIEW_BELOW
from tagger.errors import TaggerError, quoted
from tagger.serve.settings import ServiceSettings

FIELDS = ("texts", "min_score", "review_below")


class RequestRefused(TaggerError):
    """A request the service will not tag: its HTTP status, a one-line message and the field it
    is about (None for the body as a whole)."""

    def __init__(self, status: int, message: str, field: str | None = None) -> None:
        super().__init__(message)
        self.status = status
        self.message = message
        self.field = field


@dataclass(frozen=True)
class TagRequest:
    texts: list[str]
    min_score: float = 0.0
    review_below: float = REVIEW_BELOW


def json_kind(value: Any) -> str:
    """What a JSON value is, in the words a message uses: 'a string', 'an array', ..."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return "a number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, list):
        return "an array"
    return "an object"


def _refuse_constant(name: str) -> Any:
    # NaN and Infinity are not JSON, though Python's reader takes them by default.
    raise ValueError(f"{name} is not a JSON value")


def parse_body(body: bytes) -> Any:
    """The JSON value of a body, or a 400 saying where it stops being JSON."""
    try:
        text = body.decode("utf-8")
    except UnicodeDecodeError as error:
        raise RequestRefused(
            400, f"the body is not UTF-8 text (byte {error.start} cannot be decoded)"
        ) from None
    try:
        return json.loads(text, parse_constant=_refuse_constant)
    except json.JSONDecodeError as error:
        raise RequestRefused(
            400,
            f"the body is not JSON: {error.msg} at line {error.lineno} column {error.colno}",
        ) from None
    except ValueError as error:
        raise RequestRefused(400, f"the body is not JSON: {error}") from None
    except RecursionError:
        raise RequestRefused(
            400, "the body is not JSON this service reads: nested too deeply"
        ) from None


def _fraction(record: dict[str, Any], name: str, default: float) -> float:
    if name not in record:
        return default
    value = record[name]
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise RequestRefused(
            400, f"{name}: expected a number from 0 to 1, got {json_kind(value)}", name
        )
    if not 0 <= value <= 1:
        raise RequestRefused(400, f"{name}: expected a number from 0 to 1, got {value!r}", name)
    return float(value)


def _text(value: Any, index: int, settings: ServiceSettings) -> str:
    field = f"texts[{index}]"
    if not isinstance(value, str):
        raise RequestRefused(400, f"{field}: expected a string, got {json_kind(value)}", field)
    if len(value) > settings.max_text_chars:
        raise RequestRefused(
            413,
            f"{field}: {len(value):,} characters is more than this service's limit of "
            f"{settings.max_text_chars:,} per text; cut the text into smaller ones",
            field,
        )
    try:
        value.encode("utf-8")
    except UnicodeEncodeError as error:  # a lone surrogate written as a \ud800 escape
        raise RequestRefused(
            400,
            f"{field}: character {error.start} is a lone surrogate (an escape such as \\ud800 "
            "without its pair), which is not text",
            field,
        ) from None
    return value


def read_tag_request(body: bytes, settings: ServiceSettings) -> TagRequest:
    """Texts and options of a tag request's body; RequestRefused for anything else."""
    record = parse_body(body)
    if not isinstance(record, dict):
        raise RequestRefused(
            400, f"the body must be a JSON object with a 'texts' array, not {json_kind(record)}"
        )
    unknown = [key for key in record if key not in FIELDS]
    if unknown:
        raise RequestRefused(
            400,
            f"{quoted(unknown[0])} is not a field of a tag request; its fields are "
            f"{', '.join(FIELDS)}",
            unknown[0],
        )
    if "texts" not in record:
        raise RequestRefused(
            400, "texts: missing; give the texts to tag as an array of strings", "texts"
        )
    texts = record["texts"]
    if not isinstance(texts, list):
        raise RequestRefused(
            400, f"texts: expected an array of strings, got {json_kind(texts)}", "texts"
        )
    if not texts:
        raise RequestRefused(400, "texts: the array is empty; give at least one text", "texts")
    if len(texts) > settings.max_texts:
        raise RequestRefused(
            413,
            f"texts: {len(texts):,} texts is more than this service's limit of "
            f"{settings.max_texts:,} per request; send them in several requests",
            "texts",
        )
    return TagRequest(
        [_text(value, i, settings) for i, value in enumerate(texts)],
        _fraction(record, "min_score", 0.0),
        _fraction(record, "review_below", REVIEW_BELOW),
    )
