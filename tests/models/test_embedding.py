"""The bundled sentence-embedding model (models.embedding)."""

from __future__ import annotations

import unicodedata
from pathlib import Path

import numpy as np

from models.embedding import DEFAULT_DIM, Embedder, normalise_text


def test_vectors_are_384_dimensional_unit_float32(embedder: Embedder) -> None:
    # all-MiniLM-L6-v2 produces 384-dimensional sentence embeddings (model card of
    # sentence-transformers/all-MiniLM-L6-v2); we L2-normalise them.
    texts = ["Magnolias are in flower by the lake.", "Tickets for the winter lights are on sale.", "x"]
    v = embedder.encode(texts)
    assert v.shape == (3, 384) and v.dtype == np.float32
    assert embedder.dim == DEFAULT_DIM == 384
    np.testing.assert_allclose(np.linalg.norm(v, axis=1), 1.0, atol=1e-5)
    assert v.flags["C_CONTIGUOUS"]


def test_same_text_gives_identical_vectors(embedder: Embedder) -> None:
    # Determinism of inference on CPU: common practice, no source.
    t = "Our volunteers planted 400 bulbs along the north border this week."
    a = embedder.encode([t])
    b = embedder.encode([t])
    assert np.array_equal(a, b)
    both = embedder.encode([t, t])
    assert np.array_equal(both[0], both[1])
    # Whitespace and Unicode normalisation do not change the vector.
    c = embedder.encode(["  Our volunteers planted 400 bulbs\nalong the north border this week. "])
    assert np.array_equal(a, c)


def test_paraphrase_scores_above_unrelated(embedder: Embedder) -> None:
    # A paraphrase pair is more similar than an unrelated pair: common practice, no source.
    v = embedder.encode(
        [
            "The cherry trees in the garden are blossoming now.",
            "Our cherry blossoms are flowering this week in the garden.",
            "Membership renewals now have a ten percent discount at the shop.",
            "Read our lab's new paper on soil fungi and root growth.",
        ]
    )
    para = float(v[0] @ v[1])
    assert para > float(v[0] @ v[2]) + 0.2
    assert para > float(v[0] @ v[3]) + 0.2
    assert para > float(v[1] @ v[2]) + 0.2


def test_empty_batch(embedder: Embedder) -> None:
    calls = embedder.calls
    v = embedder.encode([])
    assert v.shape == (0, 384)
    assert embedder.calls == calls


def test_calls_count_texts(embedder: Embedder) -> None:
    before = embedder.calls
    embedder.encode(["one", "two", "three"])
    assert embedder.calls == before + 3


def test_key_uses_normalised_text_and_model_id(embedder: Embedder) -> None:
    nfd = unicodedata.normalize("NFD", "Café  terrace")
    assert nfd != "Café terrace"
    assert normalise_text(nfd) == "Café terrace"  # Unicode NFC (UAX #15)
    assert embedder.key(nfd) == embedder.key("Café terrace ")
    assert embedder.key("Café terrace") != embedder.key("Cafe terrace")
    other = Embedder(model_id="another/model")  # never loaded: key needs no model
    assert other.key("Café terrace") != embedder.key("Café terrace")
    assert len(embedder.key("x")) == 64  # SHA-256 hex digest (FIPS 180-4)


def test_config_round_trip(tmp_path: Path) -> None:
    e = Embedder(batch_size=16, model_id="m/x")
    e.save(tmp_path / "emb")
    back = Embedder.load(tmp_path / "emb")
    assert (back.batch_size, back.model_id, back.model_path, back.device) == (16, "m/x", None, "cpu")
    assert back._model is None  # loading the config does not load weights


def test_key_comes_from_the_model_directory(tmp_path: Path) -> None:
    # Two directories that claim the same model id but hold different models
    # (here: a changed config) never share a vector cache key.
    for name, width in (("a", 384), ("b", 768)):
        d = tmp_path / name
        d.mkdir()
        (d / "config.json").write_text(f'{{"hidden_size": {width}}}')
        (d / "model.safetensors").write_bytes(b"\0" * width)
    a, b = (Embedder(model_path=tmp_path / n) for n in ("a", "b"))
    assert a.model_id == b.model_id
    assert a.key("Snowdrops are out") != b.key("Snowdrops are out")
    assert Embedder(model_path=tmp_path / "a").key("x") == a.key("x")  # stable


def test_dimension_is_read_from_the_model(embedder: Embedder) -> None:
    # all-MiniLM-L6-v2 has 384-dimensional sentence vectors (its model card, from memory).
    assert embedder.dim == 384 == embedder.encode(["one"]).shape[1]
    assert embedder.encode([]).shape == (0, embedder.dim)
