"""One native thread for the small calls on a forecast's path.

``threadpoolctl.threadpool_limits`` finds the loaded BLAS and OpenMP
libraries afresh on every use by reading the process's memory map: about
2 ms, more than the search it guards on a served forecast. The libraries
are found once here, the first time a forecast asks (by then faiss, NumPy's
BLAS and LightGBM are loaded), and only their thread counts are set after.
"""

from __future__ import annotations

from functools import cache
from typing import Any


@cache
def _controller() -> Any:
    from threadpoolctl import ThreadpoolController  # type: ignore[import-untyped]

    return ThreadpoolController()


def one_thread() -> Any:
    """A context manager: one thread for every native library found."""
    return _controller().limit(limits=1)
