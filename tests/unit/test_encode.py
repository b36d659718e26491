"""models.encode: rows in the order given, padding invisible, bfloat16 close and cached apart.

The reference is sentence-transformers itself encoding each text alone (a batch of one has no
padding; the attention mask makes padding invisible to a BERT-style model, so padded and
unpadded encodings agree to float32 rounding: common practice; the tolerance 1e-5 is the one
tests/slow/test_onnx_export.py uses for the same model)."""

from __future__ import annotations

import numpy as np
import pytest

from ballast.core.progress import Silent
from ballast.models.encode import EmbeddingCache, encode, encode_cached
from tests.runfolder import base_model_dir

# Lengths from 1 word to about 100 tokens, in no order.
TEXTS = [
    "torque",
    "the hydraulic pump on the port side loses pressure after the third cycle " * 6,
    "reset the fault code",
    "inspect the seal " * 20,
    "a valve",
    "the relief valve opens at a set pressure and closes again once it falls " * 3,
    "replace the filter element every 400 operating hours",
    "drain",
    "check the coolant level before starting the engine on a cold morning",
]


@pytest.fixture(scope="module")
def model():  # noqa: ANN201
    from ballast.models.loading import load_encoder

    return load_encoder(base_model_dir(), max_seq_length=128)


def test_rows_in_the_order_given_and_equal_to_one_text_at_a_time(model) -> None:  # noqa: ANN001
    alone = np.stack(
        [model.encode([t], normalize_embeddings=True, convert_to_numpy=True)[0] for t in TEXTS]
    )
    steps: list[tuple[int, int]] = []

    class Steps(Silent):
        def step(self, label: str, done: int, total: int) -> None:
            steps.append((done, total))

    got = encode(model, TEXTS, batch_size=4, progress=Steps())
    assert got.dtype == np.float32 and got.shape == alone.shape
    np.testing.assert_allclose(got, alone, atol=1e-5)
    assert steps == [(4, 9), (8, 9), (9, 9)]


def test_bfloat16_is_close_to_float32_and_cached_apart(model, tmp_path) -> None:  # noqa: ANN001
    # The bound: ten times the largest difference measured over 3,000 texts of two real
    # collections (1.6e-3, bench/encode_speed.py, docs/scale.md).
    f32 = encode(model, TEXTS, batch_size=4)
    b16 = encode(model, TEXTS, batch_size=4, bf16=True)
    assert 0 < np.abs(b16 - f32).max() < 1.6e-2
    cache = EmbeddingCache(tmp_path)
    got = encode_cached(model, "fp", TEXTS, cache, batch_size=4, bf16=True)
    np.testing.assert_array_equal(got, b16)
    assert cache.get("fp", TEXTS, 128) is None  # a float32 request misses
    np.testing.assert_array_equal(cache.get("fp", TEXTS, 128, "bfloat16"), b16)


def test_no_texts_gives_an_empty_matrix_of_the_model_width(model) -> None:  # noqa: ANN001
    assert encode(model, []).shape == (0, model.get_embedding_dimension())
