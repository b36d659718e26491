"""ballast: adapt a sentence-embedding model to your documents on a CPU, and prove the gain."""

from __future__ import annotations

__version__ = "0.1.0"

from ballast.config import Config, load_config
from ballast.core.errors import BallastError, ConfigError, GateFailed, InputError
from ballast.core.gate import decide
from ballast.core.metrics import compute, parse_metric
from ballast.core.stats import compare

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
