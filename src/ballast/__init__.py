"""ballast: adapt a sentence-embedding model to your documents on a CPU, and prove the gain."""

from __future__ import annotations

__version__ = "0.1.0"

from .config import Config, load_config  # noqa: E402
from .errors import BallastError, ConfigError, GateFailed, InputError  # noqa: E402
from .gate import decide  # noqa: E402
from .metrics import compute, parse_metric  # noqa: E402
from .stats import compare  # noqa: E402

__all__ = [
    "BallastError",
    "Config",
    "ConfigError",
    "GateFailed",
    "InputError",
    "__version__",
    "compare",
    "compute",
    "decide",
    "load_config",
    "parse_metric",
]
