"""The service's limits and batching settings: what one request may hold, how long it may take,
how many may wait, and how requests are gathered into batches."""

from __future__ import annotations

from dataclasses import dataclass, fields
from typing import Any

from tagger.errors import ConfigError


@dataclass(frozen=True)
class ServiceSettings:
    """Checked once, here; every refusal names the setting as the command line spells it."""

    max_body_bytes: int = 1_000_000  # a request body larger than this is refused unread
    max_texts: int = 64  # texts in one request
    max_text_chars: int = 20_000  # characters (code points) in one text
    timeout_seconds: float = 30.0  # from the request's arrival to its answer
    queue_requests: int = 256  # requests waiting for the tagging thread; more are refused (503)
    batch_texts: int = 64  # most texts tagged together (a larger request is tagged alone)
    batch_wait_ms: float = 5.0  # how long the first request of a batch waits for company

    def __post_init__(self) -> None:
        for name in (
            "max_body_bytes",
            "max_texts",
            "max_text_chars",
            "queue_requests",
            "batch_texts",
        ):
            self._at_least(name, 1)
        if not self.timeout_seconds > 0:
            raise ConfigError(f"--timeout must be above 0 seconds; got {self.timeout_seconds!r}")
        if not 0 <= self.batch_wait_ms <= 1000:
            raise ConfigError(
                f"--batch-wait-ms must lie in [0, 1000] milliseconds; got {self.batch_wait_ms!r}"
            )

    def _at_least(self, name: str, low: int) -> None:
        value = getattr(self, name)
        if value < low:
            option = "--" + name.replace("_", "-")
            raise ConfigError(f"{option} must be at least {low}; got {value!r}")

    @property
    def batch_wait_seconds(self) -> float:
        return self.batch_wait_ms / 1000

    def to_record(self) -> dict[str, Any]:
        """The limits a client must keep to, as the model description shows them."""
        return {field.name: getattr(self, field.name) for field in fields(self)}
