"""The embedding model exported to ONNX and run with ONNX Runtime.

sentence-transformers' own ``backend="onnx"`` exports through optimum, whose
releases pin an older transformers than ours, so the export is done here
with ``torch.onnx.export``: the transformer, mean pooling and L2
normalisation in one graph, tokenised with the model's own
``tokenizer.json`` through the ``tokenizers`` library (what the fast
tokenizer of transformers runs underneath). The fp32 graph gives the torch
vectors to within float rounding; an int8 graph (dynamic quantisation of the
weights) is faster but its vectors differ, so it is only made on request.

An export is a directory with ``model.onnx``, ``tokenizer.json`` and
``export.json`` (written last, through a rename), named by a hash of the
model's identity and the export settings, so a changed model or setting
never reuses an old graph. Nothing is fetched: the weights come from the
model directory on disk.

torch and sentence-transformers are imported only by :func:`export`; running
an export needs only onnxruntime, tokenizers and numpy. Importing this module
fails when onnxruntime is missing, before any export is attempted.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import onnxruntime as ort  # an ImportError here makes the embedder fall back to torch
from tokenizers import Tokenizer

from models.errors import InputError, StoreError

EXPORT_FORMAT = 1  # bump when the graph or the files of an export change
OPSET = 17
QUANTIZE_CHOICES = ("none", "int8")
CONFIG_NAME = "export.json"
MODEL_NAME = "model.onnx"
TOKENIZER_NAME = "tokenizer.json"
INPUTS = ("input_ids", "attention_mask", "token_type_ids")
# An fp32 export must reproduce the torch vectors (issue 16: within 1e-5 cosine);
# int8 changes them by design (cosine ~0.99 on the demo texts), so only a
# broken graph falls below this.
FP32_MIN_COSINE = 0.99999
INT8_MIN_COSINE = 0.9
_PROBES = (
    "Magnolias are in flower by the lake.",
    "Winter lights: tickets for the evening trail go on sale on Friday at 10:00.",
    "x",
)


class ExportFailed(StoreError):
    """The model could not be exported to ONNX (the caller may fall back to torch)."""


def check_quantize(quantize: str) -> str:
    if quantize not in QUANTIZE_CHOICES:
        raise InputError(
            f"unknown quantisation {quantize!r}; choose one of {', '.join(QUANTIZE_CHOICES)}",
            field="embed_quantize",
            value=quantize,
        )
    return quantize


def model_fingerprint(model_path: Path) -> str:
    """Identity of a model directory: names, sizes and contents of its small
    files, and names, sizes and modification times of the large ones (hashing
    90 MB of weights on every start would cost more than the export saves)."""
    h = hashlib.sha256()
    for f in sorted(p for p in model_path.rglob("*") if p.is_file() and ".git" not in p.parts):
        st = f.stat()
        h.update(str(f.relative_to(model_path)).encode() + b"\x00" + str(st.st_size).encode())
        if st.st_size <= 1_000_000:
            h.update(f.read_bytes())
        else:
            h.update(str(st.st_mtime_ns).encode())
    return h.hexdigest()


def export_name(*, model_id: str, model_path: Path, quantize: str) -> str:
    """Directory name of the export of this model with these settings."""
    h = hashlib.sha256()
    for part in (model_id, model_fingerprint(model_path), quantize, str(OPSET), str(EXPORT_FORMAT)):
        h.update(part.encode() + b"\x00")
    return f"onnx-{quantize}-{h.hexdigest()[:16]}"


def find_or_export(*, root: Path, model_id: str, model_path: Path, quantize: str) -> Path:
    """The export directory under ``root``, exporting first if there is none."""
    check_quantize(quantize)
    target = root / export_name(model_id=model_id, model_path=model_path, quantize=quantize)
    if (target / CONFIG_NAME).is_file():
        return target
    return export(model_path=model_path, model_id=model_id, target=target, quantize=quantize)


def export(*, model_path: Path, model_id: str, target: Path, quantize: str = "none") -> Path:
    """Export the sentence-transformers model at ``model_path`` into ``target``.

    The graph is checked against the torch model on a few probe texts before
    it is kept. Raises :class:`ExportFailed` for anything that goes wrong.
    """
    check_quantize(quantize)
    tmp = target.with_name(f"{target.name}.tmp-{os.getpid()}")
    try:
        shutil.rmtree(tmp, ignore_errors=True)
        tmp.mkdir(parents=True)
        cfg = _export_into(tmp, model_path=model_path, model_id=model_id, quantize=quantize)
        (tmp / CONFIG_NAME).write_text(json.dumps(cfg, indent=2))
        try:
            tmp.rename(target)
        except OSError:
            # Another process finished the same export first: theirs is as good.
            if not (target / CONFIG_NAME).is_file():
                raise
        return target
    except ExportFailed:
        raise
    except Exception as exc:  # torch's exporter raises many kinds; all mean "no ONNX"
        raise ExportFailed(
            f"exporting the embedding model to ONNX failed: {type(exc).__name__}: {exc}",
            where=str(model_path),
        ) from exc
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def _export_into(tmp: Path, *, model_path: Path, model_id: str, quantize: str) -> dict[str, Any]:
    import torch
    from sentence_transformers import SentenceTransformer

    st = SentenceTransformer(str(model_path), device="cpu", local_files_only=True)
    modules = [type(m).__name__ for m in st]
    pooling = st[1] if len(st) > 1 else None
    if (
        modules[:2] != ["Transformer", "Pooling"]
        or modules[2:] not in ([], ["Normalize"])
        or getattr(pooling, "pooling_mode", "mean") not in ("mean", None)
        or not getattr(pooling, "pooling_mode_mean_tokens", True)
    ):
        raise ExportFailed(
            f"the model's modules {modules} are not transformer + mean pooling "
            "(+ normalise); only that layout is exported",
            where=str(model_path),
        )
    tok_file = model_path / TOKENIZER_NAME
    if not tok_file.is_file():
        raise ExportFailed("the model has no tokenizer.json", where=str(model_path))

    class _Graph(torch.nn.Module):
        def __init__(self, transformer: torch.nn.Module) -> None:
            super().__init__()
            self.transformer = transformer

        def forward(self, input_ids: Any, attention_mask: Any, token_type_ids: Any) -> Any:
            h = self.transformer(
                input_ids=input_ids, attention_mask=attention_mask, token_type_ids=token_type_ids
            ).last_hidden_state
            m = attention_mask.unsqueeze(-1).to(h.dtype)
            # The same mean pooling and normalisation as sentence-transformers'
            # Pooling (mean tokens) and Normalize modules.
            v = (h * m).sum(1) / m.sum(1).clamp(min=1e-9)
            return torch.nn.functional.normalize(v, p=2.0, dim=1)

    # torch types Module.__getattr__ as Tensor | Module; auto_model is the transformer Module.
    graph = _Graph(st[0].auto_model).eval()  # type: ignore[arg-type]
    dummy = torch.ones((2, 8), dtype=torch.long)
    fp32 = tmp / ("model-fp32.onnx" if quantize != "none" else MODEL_NAME)
    axes = {n: {0: "batch", 1: "tokens"} for n in INPUTS}
    axes["sentence_embedding"] = {0: "batch"}
    with torch.no_grad(), warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the tracer's notes on Python control flow
        torch.onnx.export(
            graph,
            (dummy, dummy, torch.zeros_like(dummy)),
            str(fp32),
            input_names=list(INPUTS),
            output_names=["sentence_embedding"],
            dynamic_axes=axes,
            opset_version=OPSET,
            dynamo=False,
        )
    if quantize == "int8":
        from onnxruntime.quantization import QuantType, quantize_dynamic

        quantize_dynamic(str(fp32), str(tmp / MODEL_NAME), per_channel=True, weight_type=QuantType.QInt8)
        fp32.unlink()
    shutil.copyfile(tok_file, tmp / TOKENIZER_NAME)
    cfg = {
        "format": EXPORT_FORMAT,
        "model_id": model_id,
        "model_path": str(model_path),
        "quantize": quantize,
        "opset": OPSET,
        # sentence-transformers types both as optional; the layout checked above sets both.
        "max_seq_length": int(st.max_seq_length),  # type: ignore[arg-type]
        "dim": int(st.get_embedding_dimension()),  # type: ignore[arg-type]
        "torch": torch.__version__,
    }
    # Check the graph against the model it came from before keeping it.
    want = st.encode(list(_PROBES), normalize_embeddings=True, convert_to_numpy=True)
    got = OnnxEncoder(directory=tmp, threads=1, config=cfg).encode(list(_PROBES))
    cos = float(np.min(np.sum(want * got, axis=1)))
    floor = FP32_MIN_COSINE if quantize == "none" else INT8_MIN_COSINE
    if not cos >= floor:
        raise ExportFailed(
            f"the ONNX graph's vectors differ from the model's (cosine {cos:.6f})", where=str(model_path)
        )
    cfg["probe_min_cosine"] = cos
    return cfg


class OnnxEncoder:
    """An export loaded into an ONNX Runtime session.

    ``threads`` is the intra-op thread count (0: ONNX Runtime's default).
    Idle threads do not spin: spinning keeps cores busy between batches and
    starves a service sharing them with an import.
    """

    def __init__(self, *, directory: Path, threads: int = 0, config: dict[str, Any] | None = None) -> None:
        self.directory = directory
        self.config = config or json.loads((directory / CONFIG_NAME).read_text())
        opts = ort.SessionOptions()
        opts.intra_op_num_threads = max(0, int(threads))
        opts.inter_op_num_threads = 1
        opts.execution_mode = ort.ExecutionMode.ORT_SEQUENTIAL
        opts.add_session_config_entry("session.intra_op.allow_spinning", "0")
        opts.add_session_config_entry("session.inter_op.allow_spinning", "0")
        opts.log_severity_level = 3
        self.session = ort.InferenceSession(
            str(directory / MODEL_NAME), opts, providers=["CPUExecutionProvider"]
        )
        self.session_options = opts
        tok = Tokenizer.from_file(str(directory / TOKENIZER_NAME))
        # sentence-transformers truncates at the model's max_seq_length and pads
        # each batch to its longest text, whatever tokenizer.json says.
        tok.no_truncation()
        tok.no_padding()
        tok.enable_truncation(max_length=int(self.config["max_seq_length"]))
        pad = tok.token_to_id("[PAD]")
        tok.enable_padding(pad_id=0 if pad is None else pad, pad_token="[PAD]")
        self.tokenizer = tok
        self.dim = int(self.config["dim"])

    def encode(self, texts: Sequence[str], batch_size: int = 64) -> np.ndarray:
        out = np.empty((len(texts), self.dim), dtype=np.float32)
        # Longest first, as sentence-transformers does: batches of similar
        # lengths carry little padding.
        order = np.argsort([-len(t) for t in texts], kind="stable")
        for start in range(0, len(texts), max(1, batch_size)):
            idx = order[start : start + batch_size]
            enc = self.tokenizer.encode_batch([texts[i] for i in idx])
            feed = {
                "input_ids": np.array([e.ids for e in enc], dtype=np.int64),
                "attention_mask": np.array([e.attention_mask for e in enc], dtype=np.int64),
                "token_type_ids": np.array([e.type_ids for e in enc], dtype=np.int64),
            }
            out[idx] = self.session.run(None, feed)[0]
        return out
