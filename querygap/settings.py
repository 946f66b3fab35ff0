"""Settings of a review, checked against one declarative table before any work starts."""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field
from typing import Any

from querygap.errors import ConfigError
from querygap.indexing import IndexSettings
from querygap.weighting import IDF_SCHEMES, MODELS, TF_SCHEMES

# name -> (kind, allowed); kind "range" takes (low, high) inclusive, "choice" a tuple of values.
CONSTRAINTS: dict[str, tuple[str, Any]] = {
    "min_score": ("range", (0.0, 1.0)),
    "min_coverage": ("range", (0.0, 1.0)),
    "title_weight": ("range", (0.0, 100.0)),
    "heading_weight": ("range", (0.0, 100.0)),
    "tf": ("choice", TF_SCHEMES),
    "idf": ("choice", IDF_SCHEMES),
    "model": ("choice", MODELS),
    "k1": ("range", (0.0, 10.0)),
    "b": ("range", (0.0, 1.0)),
}


@dataclass(frozen=True)
class ReviewSettings:
    """Thresholds of the flag stage and the index settings.

    ``min_score`` and ``min_coverage`` were chosen on the demo data (see README, "Statuses").
    """

    min_score: float = 0.05
    min_coverage: float = 0.60
    index: IndexSettings = field(default_factory=IndexSettings)

    def to_json(self) -> str:
        return json.dumps(asdict(self), sort_keys=True)


def check_value(name: str, value: Any) -> None:
    """Raise ConfigError naming the setting, the allowed values and the value received."""
    kind, allowed = CONSTRAINTS[name]
    if kind == "range":
        low, high = allowed
        if not isinstance(value, int | float) or not low <= value <= high:
            raise ConfigError(
                f"--{name.replace('_', '-')} must be a number from {low} to {high}; got {value!r}"
            )
    elif value not in allowed:
        raise ConfigError(
            f"--{name.replace('_', '-')} must be one of {', '.join(allowed)}; got {value!r}"
        )


def validate(settings: ReviewSettings) -> ReviewSettings:
    """Check every setting and the combinations that cannot work together."""
    check_value("min_score", settings.min_score)
    check_value("min_coverage", settings.min_coverage)
    idx = settings.index
    check_value("title_weight", idx.title_weight)
    check_value("heading_weight", idx.heading_weight)
    for name in ("tf", "idf", "model", "k1", "b"):
        check_value(name, getattr(idx.weighting, name))
    if idx.weighting.model == "bm25" and (
        idx.weighting.tf != "share" or idx.weighting.idf != "plain"
    ):
        raise ConfigError(
            f"--model bm25 has its own tf and idf; --tf {idx.weighting.tf} and "
            f"--idf {idx.weighting.idf} cannot be combined with it"
        )
    return settings
