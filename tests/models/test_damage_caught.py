"""Damaged artefacts are caught before a native library reads them: a model
of the older format damaged in the middle of a booster file (LightGBM's parser
ends the process on it), and a damaged FAISS index (it answered similarity
4.8e37 with unrelated posts while health said ready). The damaged one is
skipped or rebuilt, health says so, and the process lives on.

References: cosine similarity of unit vectors is at most 1 (Cauchy-Schwarz);
the nearest neighbours are recomputed with numpy's exact dot products, not
with FAISS.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from fastapi.testclient import TestClient
from test_reliability import copy_home, open_ws, second_version, trained_home

from models.integrity import REPAIRED
from service.api.app import create_app
from service.forecast.draft import Draft

_ = (copy_home, trained_home)  # fixtures, used by name


def damage_middle(path: Path, fill: bytes) -> None:
    data = bytearray(path.read_bytes())
    mid = len(data) // 2
    data[mid : mid + 256] = (fill * 256)[:256]
    path.write_bytes(bytes(data))


def test_old_format_booster_damaged_in_the_middle_is_skipped(copy_home: Path, embedder) -> None:
    old, new = second_version(copy_home)
    d = copy_home / "forecasters" / "impressions" / new
    cfg = json.loads((d / "config.json").read_text())
    cfg["format"] = 1  # as saved before checksums
    del cfg["files"]
    (d / "config.json").write_text(json.dumps(cfg))
    booster = d / "quantiles" / "boosted" / "median.txt"
    damage_middle(booster, b"x")  # the end of the file is intact: the old check passed it
    # What LightGBM itself does with this file, in a child so this process lives.
    r = subprocess.run(
        [sys.executable, "-c", f"import lightgbm; lightgbm.Booster(model_file={str(booster)!r})"],
        capture_output=True,
        timeout=300,
    )
    assert r.returncode != 0
    ws = open_ws(copy_home, embedder)
    try:
        f = ws.forecaster.forecast([Draft(text="Tulips by the lake are opening", account="garden")])[0]
        assert f.model_version == old
        with TestClient(create_app(workspace=ws)) as c:
            health = c.get("/v1/health").json()
        assert health["forecaster"] == old
        (named,) = health["damaged_models"]
        assert new in named and "median.txt" in named and "LightGBM" in named
    finally:
        ws.close()


def test_an_intact_old_format_model_is_parsed_once_then_checksummed(copy_home: Path, embedder) -> None:
    old, new = second_version(copy_home)
    d = copy_home / "forecasters" / "impressions" / new
    cfg = json.loads((d / "config.json").read_text())
    cfg["format"] = 1
    del cfg["files"]
    (d / "config.json").write_text(json.dumps(cfg))
    ws = open_ws(copy_home, embedder)
    try:
        draft = [Draft(text="Lilies in the glasshouse", account="garden")]
        assert ws.forecaster.forecast(draft)[0].model_version == new
        sums = json.loads((d / "checked.json").read_text())
        assert "quantiles/boosted/median.txt" in sums
    finally:
        ws.close()
    # Damage after the check: caught by the checksums now kept beside it.
    damage_middle(d / "quantiles" / "boosted" / "upper_0.txt", b"7")
    ws = open_ws(copy_home, embedder)
    try:
        assert ws.forecaster.forecast(draft)[0].model_version == old
    finally:
        ws.close()


@pytest.mark.parametrize("checksummed", [True, False], ids=["checksummed", "saved-before-checksums"])
def test_a_damaged_index_is_rebuilt_and_health_says_so(copy_home: Path, embedder, checksummed: bool) -> None:
    index_dir = copy_home / "index"
    cfg = json.loads((index_dir / "config.json").read_text())
    assert "files" in cfg  # every save records its checksums
    if not checksummed:
        del cfg["files"]
        (index_dir / "config.json").write_text(json.dumps(cfg))
    # 0x7f7f7f7f is a float32 of 3.4e38: vectors no longer unit length.
    data = bytearray((index_dir / "index.faiss").read_bytes())
    data[len(data) // 8 : len(data) * 7 // 8] = b"\x7f" * (len(data) * 7 // 8 - len(data) // 8)
    (index_dir / "index.faiss").write_bytes(bytes(data))
    REPAIRED.clear()
    ws = open_ws(copy_home, embedder)
    try:
        frame = ws.store.posts_frame()
        texts = list(frame["text"][:5])
        with TestClient(create_app(workspace=ws)) as c:
            health = c.get("/v1/health").json()
            assert health["index"]["state"] == "ready"
            assert any(r.startswith("index:") and "rebuilt" in r for r in health["repaired"])
            found = c.post("/v1/precedents", json={"text": texts[0], "k": 5}).json()["precedents"]
        assert all(p["similarity"] <= 1.0001 for p in found)
        # The exact top 5 by numpy over the store's own vectors.
        keys = [k for _, k in ws.store.index_pairs()]
        sims = ws.store.vectors(keys) @ embedder.encode([texts[0]])[0]
        want = np.sort(sims)[::-1][:5]
        assert [p["similarity"] for p in found] == pytest.approx(want, abs=2e-4)
    finally:
        ws.close()
