"""A trained forecast model as a versioned artefact directory.

    <models_dir>/<metric>/<version>/
        config.json      metric, feature settings, training facts (written last)
        report.json      the training report with its backtest
        quantiles/       the forecaster: a StackedForecaster (older versions: a
                         QuantileForecaster), its own config.json + boosters
        text/            the ridge text model on embedding vectors (if any)
        learned/         the learned neighbours: projection and bank (if any)

A version is written into a hidden temporary directory and renamed into
place in one step, so a reader either sees a whole model or none: the
service never serves a half-written one.

The config records the size and SHA-256 of every other file of the version,
and a version is checked against them in Python before any native library
reads a byte: LightGBM aborts the whole process (exit 134) on a truncated
booster file, so a damaged file must never reach it. A damaged version is
skipped with a warning and the newest intact one is served instead.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import threading
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from models.errors import NotFound, NotReady, StoreError
from models.features import FEATURE_NAMES, FeatureParams
from models.integrity import SEEN_NAME, SeenHashes, boosters_parse, checksums, mismatch, sha256_file
from models.learned_neighbours import LearnedNeighbours
from models.regressor import QuantileForecaster
from models.stack_columns import EXTRA_NAMES, ExtraModels, draft_columns
from models.stacking import StackedForecaster
from models.textmodel import RidgeText

CONFIG = "config.json"
REPORT = "report.json"
FORMAT = 2  # 2: the config lists every file's size and SHA-256
TMP_PREFIX = ".tmp-"

log = logging.getLogger("sounding.models")


class DamagedModel(StoreError):
    """A model version whose files do not match its config."""

    code = "damaged_model"


@dataclass(slots=True)
class TrainedModel:
    metric: str
    version: str
    features: FeatureParams
    forecaster: QuantileForecaster | StackedForecaster  # saved in quantiles/
    report: dict[str, Any] = field(default_factory=dict)
    text: RidgeText | None = None
    learned: LearnedNeighbours | None = None

    def rows(self, X: np.ndarray, vectors: np.ndarray, accounts: list[int]) -> np.ndarray:
        """Draft rows as the forecaster reads them: the features of
        ``models.features.assemble`` plus, for a stacked forecaster, the
        extra columns it was trained with (``stack_columns.draft_columns``:
        the text model's prediction, the account code, the learned
        neighbours; a model saved before a column existed lacks it)."""
        if X.shape[1] >= self.forecaster.n_features_in_:
            return X
        # Only the columns made here; any after them (the shared-terms columns)
        # are added by the caller that keeps their index.
        trained = getattr(self.forecaster, "feature_names_", ())[len(FEATURE_NAMES) :]
        names = [c for c in trained if c in EXTRA_NAMES]
        base = X[:, FEATURE_NAMES.index("baseline")]
        extra = draft_columns(ExtraModels(self.text, self.learned), vectors, accounts, base, names)
        return np.hstack([X, extra])

    @property
    def backtested_coverage(self) -> dict[str, float]:
        return dict(self.report.get("backtest", {}).get("coverage_by_level", {}))

    def backtested_at(self, coverage: float) -> float | None:
        """Backtested coverage of the grid level that serves ``coverage``."""
        level = self.forecaster.levels_[self.forecaster.level_for(coverage)]
        return self.backtested_coverage.get(f"{level:g}")

    def save(self, root: Path) -> Path:
        """Write as ``root/<metric>/<version>``, atomically."""
        base = Path(root) / self.metric
        base.mkdir(parents=True, exist_ok=True)
        final = base / self.version
        if final.exists():
            raise StoreError(f"model version {self.version} already exists", where=str(final))
        tmp = base / f"{TMP_PREFIX}{self.version}-{os.getpid()}"
        try:
            if tmp.exists():
                shutil.rmtree(tmp)
            self.forecaster.save(tmp / "quantiles")
            if self.text is not None:
                self.text.save(tmp / "text")
            if self.learned is not None:
                self.learned.save(tmp / "learned")
            (tmp / REPORT).write_text(json.dumps(self.report, indent=2, default=str))
            cfg = {
                "format": FORMAT,
                "metric": self.metric,
                "version": self.version,
                "features": asdict(self.features),
                "files": _checksums(tmp),
            }
            (tmp / CONFIG).write_text(json.dumps(cfg, indent=2))
            os.replace(tmp, final)
        except Exception as exc:  # LightGBM's own error type included
            # A full disk, a read-only directory, LightGBM failing to write:
            # leave nothing behind, and say so in plain words.
            shutil.rmtree(tmp, ignore_errors=True)
            why = getattr(exc, "strerror", None) or (str(exc).splitlines() or [type(exc).__name__])[0]
            raise StoreError(
                f"the new {self.metric} model could not be saved ({why}); nothing was "
                "saved and the previous model, if any, is still served",
                hint="free some disk space and train again",
            ) from None
        return final

    @classmethod
    def load(cls, directory: Path) -> TrainedModel:
        """Load a version after checking every file against its config."""
        d = Path(directory)
        if not (d / CONFIG).is_file():
            raise NotFound(f"no trained model in version {d.name}")
        cfg = verify(d)
        try:
            report = json.loads((d / REPORT).read_text())
            features = FeatureParams(**cfg["features"])
        except (OSError, ValueError, TypeError, KeyError) as exc:
            raise DamagedModel(f"model version {d.name} is unreadable: {exc}") from None
        return cls(
            metric=cfg["metric"],
            version=cfg["version"],
            features=features,
            forecaster=load_forecaster(d / "quantiles"),
            report=report,
            text=RidgeText.load(d / "text") if (d / "text").is_dir() else None,
            learned=LearnedNeighbours.load(d / "learned") if (d / "learned").is_dir() else None,
        )


def _checksums(directory: Path) -> dict[str, dict[str, Any]]:
    """Size and SHA-256 of every file under ``directory`` except the config."""
    out: dict[str, dict[str, Any]] = {}
    for p in sorted(directory.rglob("*")):
        if p.is_file() and p.relative_to(directory).as_posix() != CONFIG:
            out[p.relative_to(directory).as_posix()] = {"bytes": p.stat().st_size, "sha256": sha256_file(p)}
    return out


# Verified versions, keyed by their files' (name, size, mtime): a version is
# read and hashed once, then only stat'ed, however often it is asked for.
_verified: dict[Path, tuple[tuple[Any, ...], dict[str, Any] | str]] = {}
_verified_lock = threading.Lock()


def _signature(d: Path) -> tuple[Any, ...]:
    # os.scandir rather than Path.rglob: this runs on every forecast, and
    # pathlib's object per entry cost more than the rest of the check.
    sig = []
    stack = [("", os.fspath(d))]
    while stack:
        rel, path = stack.pop()
        with os.scandir(path) as entries:
            for e in entries:
                name = f"{rel}{e.name}"
                if e.is_dir(follow_symlinks=False):
                    stack.append((f"{name}/", e.path))
                elif e.is_file() and e.name != SEEN_NAME:  # not part of the version
                    st = e.stat()
                    sig.append((name, st.st_size, st.st_mtime_ns))
    return tuple(sorted(sig))


def verify(directory: Path) -> dict[str, Any]:
    """The config of an intact version; ``DamagedModel`` naming the fault otherwise."""
    d = Path(directory)
    try:
        sig = _signature(d)
    except OSError as exc:
        raise DamagedModel(f"model version {d.name} cannot be read: {exc.strerror}") from None
    with _verified_lock:
        hit = _verified.get(d)
    if hit is None or hit[0] != sig:
        result = _check(d)
        with _verified_lock:
            _verified[d] = (sig, result)
    else:
        result = hit[1]
    if isinstance(result, str):
        raise DamagedModel(
            f"model version {d.name} is damaged: {result}",
            hint="it is skipped; delete its directory or train again",
        )
    return result


def _check(d: Path) -> dict[str, Any] | str:
    """The config, or what is wrong with the version."""
    try:
        cfg = json.loads((d / CONFIG).read_text())
    except (OSError, ValueError) as exc:
        return f"its {CONFIG} is unreadable ({exc})"
    if isinstance(cfg, dict) and cfg.get("format") == 1:
        return _check_legacy(d, cfg)
    if not isinstance(cfg, dict) or cfg.get("format") != FORMAT:
        fmt = cfg.get("format") if isinstance(cfg, dict) else None
        return f"unsupported model format {fmt!r} in its {CONFIG}"
    files = cfg.get("files")
    if not isinstance(files, dict) or not files:
        return f"its {CONFIG} lists no file checksums"
    seen = SeenHashes(d)
    for name, want in sorted(files.items()):
        p = d / name
        try:
            size = p.stat().st_size
            if not isinstance(want, dict) or size != want.get("bytes"):
                said = want.get("bytes") if isinstance(want, dict) else "?"
                return f"{name} has {size} bytes, the config says {said}"
            if not seen.matches(name, want.get("sha256")):
                return f"{name} does not match its checksum"
        except OSError:
            return f"{name} is missing"
    seen.save()
    for key in ("metric", "version", "features"):
        if key not in cfg:
            return f"its {CONFIG} has no {key!r}"
    return cfg


def versions(root: Path, metric: str) -> list[str]:
    """Complete versions of a metric's models, oldest first."""
    base = Path(root) / metric
    if not base.is_dir():
        return []
    return sorted(p.name for p in base.iterdir() if not p.name.startswith(".") and (p / CONFIG).is_file())


def intact(root: Path, metric: str) -> tuple[str | None, list[tuple[str, str]]]:
    """The newest intact version of a metric (None if there is none) and the
    damaged versions newer than it, each with what is wrong with it."""
    damaged: list[tuple[str, str]] = []
    for version in reversed(versions(root, metric)):
        try:
            verify(Path(root) / metric / version)
        except DamagedModel as exc:
            damaged.append((version, exc.message))
            continue
        return version, damaged
    return None, damaged


# LightGBM ends every text model file with these lines (its save_model
# output, read from the files it writes); a cut file lacks them.
_BOOSTER_END = b"end of parameters"
_BOOSTER_LAST = b"pandas_categorical:"


def _check_legacy(d: Path, cfg: dict[str, Any]) -> dict[str, Any] | str:
    """A version saved before checksums (format 1): every booster file must
    at least end the way LightGBM ends one, so a truncated file is caught."""
    try:
        json.loads((d / "quantiles" / CONFIG).read_text())
        boosters = sorted((d / "quantiles").rglob("*.txt"))
        if not boosters:
            return "it has no booster files"
        for p in boosters:
            with p.open("rb") as f:
                f.seek(max(p.stat().st_size - 4096, 0))
                tail = f.read()
            last = tail.rstrip(b"\n").rsplit(b"\n", 1)[-1]
            if _BOOSTER_END not in tail or not last.startswith(_BOOSTER_LAST):
                return f"quantiles/{p.name} is cut short"
    except (OSError, ValueError) as exc:
        return f"its files are unreadable ({exc})"
    for key in ("metric", "version", "features"):
        if key not in cfg:
            return f"its {CONFIG} has no {key!r}"
    wrong = _check_legacy_body(d, boosters)
    return cfg if wrong is None else wrong


LEGACY_CHECKED = "checked.json"  # checksums written once a format-1 version parsed


def _check_legacy_body(d: Path, boosters: list[Path]) -> str | None:
    """Damage inside a format-1 booster file, which only LightGBM's parser
    would find (and it may end the process): parsed once in a child process,
    then checksummed beside the version so later loads only compare hashes."""
    names = sorted(p.relative_to(d).as_posix() for p in (d / "quantiles").rglob("*") if p.is_file())
    try:
        sums = json.loads((d / LEGACY_CHECKED).read_text())
    except (OSError, ValueError):
        sums = None
    if isinstance(sums, dict) and set(sums) == set(names):
        return mismatch(d, sums)
    wrong = boosters_parse(boosters)
    if wrong is None:
        try:
            tmp = d / (LEGACY_CHECKED + ".tmp")
            tmp.write_text(json.dumps(checksums(d, names), indent=2))
            os.replace(tmp, d / LEGACY_CHECKED)
        except OSError:
            pass  # a read-only directory: parsed again next start
    return wrong


_warned: set[str] = set()


def newest(root: Path, metric: str) -> str:
    """The newest intact version; damaged newer ones are skipped with a warning."""
    found, damaged = intact(root, metric)
    for version, why in damaged:
        if version not in _warned:  # once per process, not once per forecast
            _warned.add(version)
            log.warning(
                "%s; it is skipped (%s)",
                why,
                f"version {found} is served instead" if found else "no intact version",
            )
    if found is None:
        if damaged:
            raise NotReady(
                f"every trained {metric} model is damaged ({damaged[0][1]})",
                hint=f"run `sounding train --metric {metric}`",
            )
        raise NotReady(
            f"no model trained for {metric} yet",
            hint=f"run `sounding train --metric {metric}`",
        )
    return found


def clean_leftovers(root: Path) -> list[Path]:
    """Remove the temporary directories of trainings that died (their
    process is gone): a kill or a full disk in the middle of a save."""
    removed: list[Path] = []
    root = Path(root)
    if not root.is_dir():
        return removed
    for base in root.iterdir():
        if not base.is_dir() or base.name.startswith("."):
            continue
        for p in base.iterdir():
            if p.name.startswith(TMP_PREFIX) and not _alive(p.name.rsplit("-", 1)[-1]):
                shutil.rmtree(p, ignore_errors=True)
                removed.append(p)
    return removed


def _alive(pid: str) -> bool:
    """Whether the process that named a temporary directory still runs."""
    if not pid.isdigit():
        return False
    if int(pid) == os.getpid():
        return True
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def load_forecaster(directory: str | os.PathLike[str]) -> QuantileForecaster | StackedForecaster:
    """Either kind of saved forecaster, by the kind its config names."""
    path = Path(directory) / "config.json"
    try:
        kind = json.loads(path.read_text()).get("kind")
    except (OSError, ValueError):
        kind = None
    if kind == "StackedForecaster":
        return StackedForecaster.load(directory)
    return QuantileForecaster.load(directory)
