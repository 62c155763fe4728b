"""Saved LightGBM boosters served through LightGBM's own C library.

Importing the ``lightgbm`` Python package costs far more than a forecast:
it imports scikit-learn, scipy and pandas when they are installed. Serving a
trained booster needs none of that, only ``lib_lightgbm`` itself, which the
package ships as a shared library. Here that library is loaded with ctypes
and its C API (``LGBM_BoosterCreateFromModelfile``,
``LGBM_BoosterPredictForMat``) reads the saved model text and predicts:
the same code the Python package calls, so forecasts and TreeSHAP
contributions (``C_API_PREDICT_CONTRIB``) are LightGBM's own, to the bit.
The README's "Start-up" section has the measurements behind this choice.

A booster file is parsed the first time it predicts, so a forecast at one
coverage reads only the boosters of that coverage's level.
"""

from __future__ import annotations

import contextlib
import ctypes
import importlib.metadata
import importlib.util
import os
import shutil
import threading
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np

from models.errors import StoreError

# Constants of LightGBM's C API (include/LightGBM/c_api.h).
_DTYPE_FLOAT64 = 1
_PREDICT_NORMAL = 0
_PREDICT_RAW_SCORE = 1
_PREDICT_CONTRIB = 3
_ROW_MAJOR = 1


@cache
def library() -> ctypes.CDLL:
    """lib_lightgbm from the installed package, found without importing it."""
    spec = importlib.util.find_spec("lightgbm")
    if spec is None or not spec.submodule_search_locations:
        raise StoreError("LightGBM is not installed", where="models.booster_loading")
    root = Path(next(iter(spec.submodule_search_locations)))
    names = ("lib_lightgbm.so", "lib_lightgbm.dylib", "lib_lightgbm.dll")
    for folder in (root / "lib", root / "bin", root.parent):
        for name in names:
            if (folder / name).is_file():
                lib = ctypes.cdll.LoadLibrary(str(folder / name))
                lib.LGBM_GetLastError.restype = ctypes.c_char_p
                return lib
    raise StoreError(f"no LightGBM library under {root}", where="models.booster_loading")


def lightgbm_version() -> str:
    """The installed LightGBM's version, read from its metadata (no import)."""
    return importlib.metadata.version("lightgbm")


def _check(code: int) -> None:
    if code != 0:
        message = library().LGBM_GetLastError().decode("utf-8", "replace")
        raise StoreError(f"LightGBM: {message}", where="models.booster_loading")


class NativeBooster:
    """A saved booster, read by LightGBM's C library on first use.

    Offers the part of ``lightgbm.Booster`` that serving uses: ``predict``
    (with ``pred_contrib`` and ``raw_score``) and ``num_feature``.
    """

    def __init__(self, model_file: str | os.PathLike[str]) -> None:
        self.model_file = Path(model_file)
        if not self.model_file.is_file():
            raise StoreError(f"missing booster file {self.model_file.name}", where=str(self.model_file))
        self._handle: ctypes.c_void_p | None = None
        self._n_features = 0
        self._lock = threading.Lock()

    def _booster(self) -> ctypes.c_void_p:
        with self._lock:
            if self._handle is None:
                lib = library()
                handle = ctypes.c_void_p()
                iterations = ctypes.c_int(0)
                _check(
                    lib.LGBM_BoosterCreateFromModelfile(
                        str(self.model_file).encode(), ctypes.byref(iterations), ctypes.byref(handle)
                    )
                )
                n = ctypes.c_int(0)
                _check(lib.LGBM_BoosterGetNumFeature(handle, ctypes.byref(n)))
                self._n_features = n.value
                self._handle = handle
            return self._handle

    def save_model(self, filename: str | os.PathLike[str]) -> None:
        """Write the booster where ``lightgbm.Booster.save_model`` would: the
        very text it was read from."""
        shutil.copyfile(self.model_file, filename)

    def num_feature(self) -> int:
        self._booster()
        return self._n_features

    def predict(
        self, X: Any, *, pred_contrib: bool = False, raw_score: bool = False, num_threads: int = 0
    ) -> np.ndarray:
        """Predictions of every tree, as ``lightgbm.Booster.predict``: one
        value a row, or with ``pred_contrib`` the TreeSHAP values of each
        feature and the expected value last (n, n_features + 1)."""
        handle = self._booster()
        mat = np.ascontiguousarray(X, dtype=np.float64)
        if mat.ndim != 2 or mat.shape[1] != self._n_features:
            raise StoreError(
                f"booster expects {self._n_features} features, got shape {mat.shape}",
                where=str(self.model_file),
            )
        kind = _PREDICT_CONTRIB if pred_contrib else _PREDICT_RAW_SCORE if raw_score else _PREDICT_NORMAL
        width = self._n_features + 1 if pred_contrib else 1
        out = np.empty(mat.shape[0] * width, dtype=np.float64)
        written = ctypes.c_int64(0)
        _check(
            library().LGBM_BoosterPredictForMat(
                handle,
                mat.ctypes.data_as(ctypes.c_void_p),
                ctypes.c_int(_DTYPE_FLOAT64),
                ctypes.c_int32(mat.shape[0]),
                ctypes.c_int32(mat.shape[1]),
                ctypes.c_int(_ROW_MAJOR),
                ctypes.c_int(kind),
                ctypes.c_int(0),  # from the first iteration
                ctypes.c_int(-1),  # through the last
                f"num_threads={int(num_threads)}".encode(),
                ctypes.byref(written),
                out.ctypes.data_as(ctypes.POINTER(ctypes.c_double)),
            )
        )
        if written.value != out.size:
            raise StoreError("LightGBM wrote an unexpected number of values", where=str(self.model_file))
        return out.reshape(mat.shape[0], width) if pred_contrib else out

    def __del__(self) -> None:
        handle = getattr(self, "_handle", None)
        if handle is not None:
            # At interpreter shutdown the library may be gone: nothing to free then.
            with contextlib.suppress(Exception):
                library().LGBM_BoosterFree(handle)
