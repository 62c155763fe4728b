"""The ONNX Runtime embedding backend (models.onnx_backend via models.embedding)."""

from __future__ import annotations

import csv
import json
import logging
import shutil
import sys
from pathlib import Path

import numpy as np
import pytest
from sklearn.neighbors import NearestNeighbors
from typer.testing import CliRunner

from models import onnx_backend
from models.embedding import Embedder
from models.errors import InputError, StoreError
from models.integrity import REPAIRED
from service.cli import app
from service.cli import base as cli_base
from service.health import health as health_of
from service.settings import Settings
from service.workspace import Workspace

DEMO_CSV = Path(__file__).resolve().parents[2] / "demo_data" / "posts.csv"


def demo_texts(step: int) -> list[str]:
    with DEMO_CSV.open(encoding="utf-8", newline="") as f:
        texts = [r["text"] for r in csv.DictReader(f)]
    return texts[::step]


def top10(vectors: np.ndarray) -> list[list[int]]:
    """Each row's 10 nearest other rows. The row itself is dropped by index, not
    by position: demo texts that differ only in an emoji (the tokenizer's [UNK])
    have identical vectors and tie with it."""
    idx = (
        NearestNeighbors(n_neighbors=11, metric="cosine", algorithm="brute")
        .fit(vectors)
        .kneighbors(vectors, return_distance=False)
    )
    return [[int(j) for j in row if j != i][:10] for i, row in enumerate(idx)]


@pytest.fixture(scope="module")
def onnx_home(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A data directory whose embedding/ holds the fp32 export (made once here)."""
    home = tmp_path_factory.mktemp("onnx-home")
    Embedder(backend="onnx", export_dir=home / "embedding").prepare()
    return home


@pytest.fixture(scope="module")
def onnx_embedder(onnx_home: Path) -> Embedder:
    return Embedder(backend="onnx", export_dir=onnx_home / "embedding", threads=2).prepare()


def test_onnx_vectors_match_sentence_transformers(onnx_embedder: Embedder, embedder: Embedder) -> None:
    # 600 of the 3,000 demo texts (every 5th) keep the suite short; bench_import.py
    # compares all of them.
    texts = demo_texts(5)
    got = onnx_embedder.encode(texts)
    assert onnx_embedder.backend_ == "onnx"
    # Reference: sentence-transformers' own torch model (SentenceTransformer.encode),
    # not our export. cosine >= 0.99999 for every text.
    ref_model = embedder._load()
    assert type(ref_model).__name__ == "SentenceTransformer"
    want = ref_model.encode(
        texts, batch_size=64, normalize_embeddings=True, convert_to_numpy=True, show_progress_bar=False
    )
    cos = np.sum(got * want, axis=1) / (np.linalg.norm(got, axis=1) * np.linalg.norm(want, axis=1))
    assert cos.min() >= 0.99999, f"lowest cosine {cos.min():.7f}"
    # Same top-10 neighbours by scikit-learn's exact (brute-force) cosine search.
    a, b = top10(got), top10(want)
    same = [set(x) == set(y) for x, y in zip(a, b, strict=True)]
    assert all(same), f"{len(same) - sum(same)} texts have different top-10 neighbours"


def test_fp32_onnx_shares_cache_keys_int8_does_not(
    onnx_embedder: Embedder, embedder: Embedder, tmp_path: Path
) -> None:
    # fp32 ONNX vectors equal the torch ones, so the vector cache is shared; int8
    # vectors differ, so they get their own keys (never loaded here: keys need no model).
    assert onnx_embedder.key("Snowdrops by the lake") == embedder.key("Snowdrops by the lake")
    int8 = Embedder(backend="onnx", quantize="int8", export_dir=tmp_path)
    assert int8.key("Snowdrops by the lake") != embedder.key("Snowdrops by the lake")
    assert int8.vector_space != embedder.vector_space
    assert int8._onnx is None and int8.backend_ is None


def test_session_threads_do_not_spin(onnx_embedder: Embedder) -> None:
    # ONNX Runtime's documented session config keys (onnxruntime_session_options_config_keys.h):
    # idle pool threads must not busy-wait on cores a service shares with an import.
    enc = onnx_embedder._onnx
    opts = enc.session_options
    assert opts.get_session_config_entry("session.intra_op.allow_spinning") == "0"
    assert opts.get_session_config_entry("session.inter_op.allow_spinning") == "0"
    assert opts.intra_op_num_threads == 2


def test_export_is_reused_and_keyed_by_settings(onnx_home: Path) -> None:
    root = onnx_home / "embedding"
    exports = [p for p in root.iterdir() if p.is_dir()]
    assert len(exports) == 1 and exports[0].name.startswith("onnx-none-")
    cfg = json.loads((exports[0] / onnx_backend.CONFIG_NAME).read_text())
    assert cfg["quantize"] == "none" and cfg["probe_min_cosine"] >= 0.99999
    model_path = Path(cfg["model_path"])
    assert (
        onnx_backend.export_name(model_id=cfg["model_id"], model_path=model_path, quantize="none")
        == exports[0].name
    )
    assert (
        onnx_backend.export_name(model_id=cfg["model_id"], model_path=model_path, quantize="int8")
        != exports[0].name
    )
    # A second embedder finds the export instead of making another.
    e = Embedder(backend="onnx", export_dir=root).prepare()
    assert e.export_path_ == exports[0]
    assert [p.name for p in root.iterdir()] == [exports[0].name]


def test_missing_onnxruntime_falls_back_to_torch_with_one_warning(
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    caplog: pytest.LogCaptureFixture,
    embedder: Embedder,
) -> None:
    # Simulate an install without onnxruntime: importing it raises ImportError.
    monkeypatch.setitem(sys.modules, "onnxruntime", None)
    monkeypatch.delitem(sys.modules, "models.onnx_backend", raising=False)
    monkeypatch.delattr(sys.modules["models"], "onnx_backend", raising=False)
    caplog.set_level(logging.WARNING, logger="sounding.embedding")
    e = Embedder(backend="auto", export_dir=tmp_path / "embedding")
    texts = ["Snowdrops along the woodland walk", "Volunteer morning in the propagation house"]
    v = e.encode(texts)
    v2 = e.encode(texts)
    assert e.backend_ == "torch" and "onnxruntime" in (e.fallback_reason_ or "")
    warnings = [r for r in caplog.records if r.name == "sounding.embedding"]
    assert len(warnings) == 1 and "torch" in warnings[0].getMessage()
    assert not (tmp_path / "embedding").exists()  # nothing exported
    np.testing.assert_array_equal(v, v2)
    np.testing.assert_allclose(v, embedder.encode(texts), atol=1e-6)
    assert e.info()["fallback"]
    # Asked for onnx explicitly, the same situation is an error, not a fallback.
    with pytest.raises(StoreError, match="ONNX embedding backend is unavailable"):
        Embedder(backend="onnx", export_dir=tmp_path / "embedding").encode(texts)


def test_failed_export_falls_back_to_torch(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, caplog: pytest.LogCaptureFixture
) -> None:
    import torch

    def broken(*args: object, **kwargs: object) -> None:
        raise RuntimeError("simulated exporter failure")

    monkeypatch.setattr(torch.onnx, "export", broken)
    caplog.set_level(logging.WARNING, logger="sounding.embedding")
    e = Embedder(backend="auto", export_dir=tmp_path / "embedding")
    assert e.encode(["Magnolias are in flower"]).shape == (1, 384)
    assert e.backend_ == "torch" and "simulated exporter failure" in (e.fallback_reason_ or "")
    assert len([r for r in caplog.records if r.name == "sounding.embedding"]) == 1
    # The half-made export is cleaned away, so the next start tries again.
    assert list((tmp_path / "embedding").iterdir()) == []


def test_int8_is_refused_unless_asked_for(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, embedder: Embedder
) -> None:
    with pytest.raises(InputError, match="int8 quantisation needs the onnx backend"):
        Embedder(backend="torch", quantize="int8", export_dir=tmp_path)
    with pytest.raises(InputError, match="unknown quantisation"):
        Embedder(quantize="int4", export_dir=tmp_path)
    # The command refuses --int8 while the setting does not ask for it.
    runner = CliRunner()
    cli_base.use_embedder(embedder)
    (tmp_path / "home").mkdir()  # a data directory, as `model export` reads one
    monkeypatch.setenv("SOUNDING_HOME", str(tmp_path / "home"))
    monkeypatch.delenv("SOUNDING_EMBED_QUANTIZE", raising=False)
    res = runner.invoke(app, ["model", "export", "--int8"])
    assert res.exit_code == 1
    assert "SOUNDING_EMBED_QUANTIZE=int8" in res.output and "Traceback" not in res.output
    assert not (tmp_path / "home" / "embedding").exists()


def test_int8_setting_is_recorded_in_health(tmp_path: Path) -> None:
    s = Settings(home=tmp_path / "home", embed_quantize="int8")
    ws = Workspace(settings=s)  # its own embedder, built from the settings
    try:
        health = health_of(ws).model_dump()
        assert health["embedding"]["quantize"] == "int8"
        assert health["embedding"]["vector_space"].endswith("#onnx-int8")
        default = Workspace(settings=Settings(home=tmp_path / "other"))
        assert health_of(default).model_dump()["embedding"]["quantize"] == "none"
        assert default.embedder.key("a") != ws.embedder.key("a")
        default.close()
    finally:
        ws.close()


def test_model_export_command_reports_the_export(onnx_home: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("SOUNDING_HOME", str(onnx_home))
    monkeypatch.setattr(cli_base, "_embedder", None)
    monkeypatch.setattr(cli_base, "_workspace", None)
    res = CliRunner().invoke(app, ["model", "export", "--json"])
    assert res.exit_code == 0, res.output
    info = json.loads(res.output)
    assert info["backend"] == "onnx" and info["quantize"] == "none"
    assert Path(info["export"]).parent == onnx_home / "embedding"


def test_a_damaged_export_is_exported_again(onnx_home: Path, embedder: Embedder, tmp_path: Path) -> None:
    """A graph damaged in the middle of its weights can still load and give
    wrong vectors: its checksum catches it and it is exported again; the new
    one's vectors match sentence-transformers' (the reference) again."""
    (export,) = [p for p in (onnx_home / "embedding").iterdir() if p.is_dir()]
    root = tmp_path / "embedding"
    shutil.copytree(export, root / export.name)
    graph = root / export.name / onnx_backend.MODEL_NAME
    data = bytearray(graph.read_bytes())
    mid = len(data) // 2
    data[mid : mid + 4096] = b"\x7f" * 4096
    graph.write_bytes(bytes(data))
    assert (
        onnx_backend.export_problem(root / export.name)
        == f"{onnx_backend.MODEL_NAME} does not match its checksum"
    )
    e = Embedder(backend="onnx", export_dir=root).prepare()
    assert onnx_backend.export_problem(e.export_path_) is None
    assert any("exported again" in r for r in REPAIRED)
    texts = ["Snowdrops under the cedar this week", "The seed library opens on Saturday"]
    assert np.allclose(e.encode(texts), embedder.encode(texts), atol=1e-4)
