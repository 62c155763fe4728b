"""Embedding new texts on a Ray cluster, for big backfills.

``sounding import FILE --cluster ray://HOST:PORT`` reads, validates and
writes exactly as a local import does; only the embedding of texts not seen
before runs on the cluster, with Ray Data: each import batch becomes a
dataset whose ``map_batches`` runs :class:`EmbedOnWorker`, a callable class,
so each worker loads the model once and embeds many batches with it.

The cluster's nodes need sounding installed (with its bundled model
package), so that workers can import this module and load the same model;
the driver needs the optional extra ``sounding[cluster]`` (Ray Data and the
Ray Client). Ray is imported only when a cluster is used, so the default
install does not need it.
"""

from __future__ import annotations

import re
import tempfile
import time
from pathlib import Path
from types import TracebackType
from typing import Any

import numpy as np

from models.constraints import AT_LEAST_ONE
from models.embedding import Embedder
from models.errors import InputError, ServiceUnavailable

_ADDRESS = re.compile(r"^ray://[^\s:/]+:\d{1,5}$")


def check_address(address: str) -> str:
    """A Ray Client address, ``ray://HOST:PORT``, or a clear error."""
    if not _ADDRESS.match(address):
        raise InputError(
            f"{address!r} is not a Ray Client address",
            field="cluster",
            value=address,
            hint="give ray://HOST:PORT, the head node's client server (port 10001 by default)",
        )
    return address


def worker_config(embedder: Embedder) -> dict[str, Any]:
    """The settings a worker's Embedder is built from: the same model in the
    same vector space. Workers keep any ONNX export in their node's temporary
    directory (``export_dir`` None here, filled in on the worker)."""
    return {
        "model_path": None if embedder.model_path is None else str(embedder.model_path),
        "model_id": embedder.model_id,
        "batch_size": embedder.batch_size,
        "backend": embedder.backend,
        "quantize": embedder.quantize,
        "onnx": embedder.export_dir is not None,
        "threads": 1,  # one CPU per worker: Ray schedules them by CPU
    }


class EmbedOnWorker:
    """Ray Data callable class: loads the model once when the worker starts."""

    def __init__(self, *, config: dict[str, Any]) -> None:
        cfg = dict(config)
        onnx = cfg.pop("onnx")
        model_path = cfg.pop("model_path")
        export_dir = Path(tempfile.gettempdir()) / "sounding-embedding" if onnx else None
        self.embedder = Embedder(
            **cfg,
            export_dir=export_dir,
            # A model directory given on the driver may not exist on the node;
            # None is the bundled model of the node's own install.
            model_path=model_path if model_path and Path(model_path).is_dir() else None,
        ).prepare()

    def __call__(self, batch: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
        vectors = self.embedder.encode([str(t) for t in batch["text"]])
        return {"pos": batch["pos"], "vector": vectors}


class RayEmbedder:
    """An import's embed function that embeds on a Ray cluster.

    ``workers`` is the number of model-holding actors (one CPU each);
    ``batch_size`` the texts per ``map_batches`` call; ``attempts`` how many
    times to try connecting, ``retry_pause`` the seconds between tries. Use
    it as a context manager: it connects on entry and disconnects on exit.
    """

    def __init__(
        self,
        *,
        address: str,
        embedder: Embedder,
        workers: int = 2,
        batch_size: int = 256,
        attempts: int = 3,
        retry_pause: float = 2.0,
    ) -> None:
        self.address = address
        self.embedder = embedder
        self.workers = workers
        self.batch_size = batch_size
        self.attempts = attempts
        self.retry_pause = retry_pause
        #: Texts embedded on the cluster so far.
        self.calls = 0
        self._ray: Any = None

    def connect(self) -> RayEmbedder:
        check_address(self.address)
        for name, value in (("cluster workers", self.workers), ("batch size", self.batch_size)):
            AT_LEAST_ONE.check(value, name, field="cluster_workers")
        AT_LEAST_ONE.check(self.attempts, "connection attempts", field="cluster_workers")
        try:
            import ray
            import ray.data
        except ImportError as exc:
            raise InputError(
                f"embedding on a cluster needs Ray ({exc.name} is not installed)",
                field="cluster",
                hint="pip install 'sounding[cluster]'",
            ) from None
        # The head starts one server process per client session, forked from a
        # process busy with gRPC threads; now and then that fork dies at once
        # ("Starting Ray client server failed") and a fresh session succeeds.
        # So a failed connection is tried again before it is reported.
        for attempt in range(1, self.attempts + 1):
            try:
                # Ray types logging_level as int, but passes it to logging, which takes level names too.
                ray.init(self.address, logging_level="WARNING", log_to_driver=False)  # type: ignore[arg-type]
                break
            except Exception as exc:  # grpc and Ray raise many kinds here
                ray.shutdown()  # drop the half-made client before the next try
                if attempt == self.attempts:
                    raise ServiceUnavailable(
                        f"cannot reach the Ray cluster at {self.address} "
                        f"({self.attempts} tries): {type(exc).__name__}: {exc}",
                        hint="check that the head runs `ray start --head` and its client server port",
                    ) from None
                time.sleep(self.retry_pause)
        self._ray = ray
        return self

    def close(self) -> None:
        if self._ray is not None:
            self._ray.shutdown()
            self._ray = None

    def __enter__(self) -> RayEmbedder:  # a final class in practice
        return self.connect()

    def __exit__(
        self, et: type[BaseException] | None, e: BaseException | None, tb: TracebackType | None
    ) -> None:
        self.close()

    def __call__(self, texts: list[str]) -> np.ndarray:
        """Embed ``texts`` on the cluster; rows come back in the order given."""
        if self._ray is None:
            raise ServiceUnavailable("not connected to a Ray cluster", hint="use connect()")
        if not texts:
            return np.zeros((0, self.embedder.dim), dtype=np.float32)
        # Ray Data cannot run its executor through the Ray Client (ray-project/ray#48682),
        # so the pipeline runs in a task on the cluster; it takes no CPU of its own.
        task = self._ray.remote(num_cpus=0, max_retries=0)(embed_with_ray_data)
        result = self._ray.get(
            task.remote(
                list(texts),
                config=worker_config(self.embedder),
                workers=self.workers,
                batch_size=self.batch_size,
            )
        )
        if result.shape[0] != len(texts):
            raise ServiceUnavailable(
                f"the cluster returned {result.shape[0]} vectors for {len(texts)} texts",
                hint="retry the import; rows already written are kept",
            )
        self.calls += len(texts)
        return np.ascontiguousarray(result, dtype=np.float32)


def embed_with_ray_data(
    texts: list[str], *, config: dict[str, Any], workers: int, batch_size: int
) -> np.ndarray:
    """Runs on the cluster: ``map_batches`` over the texts with an actor pool of
    ``workers`` model holders; rows in the order of ``texts``."""
    import ray.data

    ray.data.DataContext.get_current().enable_progress_bars = False
    ds = ray.data.from_items(
        [{"pos": i, "text": t} for i, t in enumerate(texts)],
        override_num_blocks=max(1, min(len(texts) // batch_size, 4 * workers)),
    )
    out = ds.map_batches(
        EmbedOnWorker,
        fn_constructor_kwargs={"config": config},
        batch_size=batch_size,
        batch_format="numpy",
        concurrency=workers,
        num_cpus=1,
    )
    result: np.ndarray | None = None
    filled = np.zeros(len(texts), dtype=bool)
    for b in out.iter_batches(batch_size=None, batch_format="numpy"):
        vecs = np.asarray(b["vector"], dtype=np.float32)
        pos = np.asarray(b["pos"], dtype=np.int64)
        if result is None:
            result = np.zeros((len(texts), vecs.shape[1]), dtype=np.float32)
        result[pos] = vecs
        filled[pos] = True
    if result is None or not filled.all():
        # Fewer rows than texts: the caller reports the gap.
        return np.zeros((int(filled.sum()), 0 if result is None else result.shape[1]), dtype=np.float32)
    return result


def cluster_import_options(ws: Any, address: str | None, *, workers: int = 2) -> dict[str, Any]:
    """Keyword arguments for ``Workspace.import_csv`` that embed on the cluster at
    ``address`` (none when ``address`` is None): the embed function, connected,
    and larger batches, since each batch is one Ray Data job whose workers
    load the model once. Ray disconnects at process exit, or call
    ``options["embed"].close()``."""
    if address is None:
        return {}
    embed = RayEmbedder(address=address, embedder=ws.embedder, workers=workers).connect()
    return {"embed": embed, "batch_rows": max(ws.settings.import_batch_rows, ws.settings.cluster_batch_rows)}
