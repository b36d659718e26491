"""The fixed sample of embeddings a bundle's manifest carries, so that an index builder can
check the model it loaded computes what ballast measured. The texts are fixed and generic (never
document text), so the manifest holds no passage of the collection."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

VERIFY_TEXTS = (
    "How do I reset the machine after a fault?",
    "Safety valves are inspected every week and the result is logged.",
    "Quarterly report, section 4.2: maintenance costs and open actions.",
    "reset procedure",
)


DECIMALS = 6


TOLERANCE = 1e-4  # float32 embeddings on another machine or library build


INT8_TOLERANCE = 2e-2  # int8 kernels differ between CPU instruction sets


def rounded(emb: np.ndarray) -> list[list[float]]:
    return [[round(float(x), DECIMALS) for x in row] for row in emb]


def verification_sample(bundle: Path) -> dict[str, Any]:
    """Embeddings of VERIFY_TEXTS from the bundle's PyTorch model, as stored in the manifest."""
    from ballast.models.encode import encode
    from ballast.models.loading import load_encoder

    model = load_encoder(bundle)
    emb = encode(model, list(VERIFY_TEXTS), batch_size=len(VERIFY_TEXTS))
    return {
        "texts": list(VERIFY_TEXTS),
        "embeddings": rounded(emb),
        "decimals": DECIMALS,
        "tolerance": TOLERANCE,
        "normalized": True,
    }
