"""The history view: the store's posts as arrays for one metric, oldest first.

Training, drafts, near-repeats and segments all read the history through
this one view, so a post is described the same way everywhere.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING, Any

import numpy as np

from models import features as F
from models.metrics import METRIC_COLUMNS, target_values
from service.settings import Settings
from service.storage.store import Store

if TYPE_CHECKING:
    # pandas loads with the first view built, not with this module.
    import pandas as pd

EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


@dataclass(slots=True)
class HistoryView:
    """The store's posts as arrays for one metric, oldest first."""

    metric: str
    #: None for a view kept between commands (service.history.viewcache): no texts then.
    frame: pd.DataFrame | None
    history: F.History
    local_hours: np.ndarray
    weekdays: np.ndarray
    forms: np.ndarray
    account_codes: dict[str, int]
    zones: dict[int, str]  # account code -> IANA zone
    #: Posts by store row id (``Store.posts_by_pk``), for a view without a frame.
    lookup: Callable[[Sequence[int]], dict[int, dict[str, Any]]] | None = None
    #: A view of the reference accounts' posts (service.history.peers) rather than the team's.
    reference: bool = False
    _columns: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)

    def details(self, rows: Sequence[int]) -> dict[int, dict[str, Any]]:
        """Posts' details with current metrics, by store row id, for History
        rows (the shape ``Store.posts_by_pk`` gives)."""
        if self.frame is None:
            assert self.lookup is not None, "a view without a frame reads posts from the store"
            return self.lookup([int(p) for p in self.history.pk[np.asarray(rows, dtype=np.int64)]])
        if "text" not in self._columns:
            # Arrays made once per view (a pandas row look-up costs more than
            # the rest of a forecast); strings stay in pandas' own array, read
            # one element at a time, so a million texts are not copied.
            f = self.frame
            made: dict[str, Any] = {c: f[c].array for c in ("post_id", "account", "text")}
            made.update({c: f[c].to_numpy() for c in ("pk", "has_link", "has_media")})
            made["posted_at"] = f["posted_at"].dt.tz_convert(UTC).to_numpy("datetime64[us]").astype(np.int64)
            made["metrics"] = f[list(METRIC_COLUMNS)].to_numpy(np.float64)
            made["followers"] = f["followers"].to_numpy(np.float64)
            self._columns.update(made)  # one step: another thread sees all or nothing
        c = self._columns
        idx = np.asarray(rows, dtype=np.int64)
        # One take per column, then plain Python values.
        post_ids, accounts, texts = (c[k].take(idx).tolist() for k in ("post_id", "account", "text"))
        out: dict[int, dict[str, Any]] = {}
        for j, (pk, micros, link, media, values, followers) in enumerate(
            zip(
                c["pk"][idx].tolist(),
                c["posted_at"][idx].tolist(),
                c["has_link"][idx].tolist(),
                c["has_media"][idx].tolist(),
                c["metrics"][idx].tolist(),
                c["followers"][idx].tolist(),
                strict=True,
            )
        ):
            out[pk] = {
                "pk": pk,
                "post_id": str(post_ids[j]),
                "account": str(accounts[j]),
                "text": str(texts[j]),
                "posted_at": EPOCH + timedelta(microseconds=micros),
                "has_link": bool(link),
                "has_media": bool(media),
                "metrics": {
                    m: None if math.isnan(v) else int(v) for m, v in zip(METRIC_COLUMNS, values, strict=True)
                },
                "reference": self.reference,
                "followers": None if math.isnan(followers) else int(followers),
            }
        return out

    def rows_for(self, pks: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(History rows, which of ``pks`` the view holds) for store row ids,
        in their order: two binary searches rather than a dict look-up each."""
        if "pk_order" not in self._columns:
            order = np.argsort(self.history.pk, kind="stable")
            self._columns.update({"pk_order": order, "pk_sorted": self.history.pk[order]})
        order, ordered = self._columns["pk_order"], self._columns["pk_sorted"]
        pks = np.asarray(pks, dtype=np.int64)
        if len(ordered) == 0:
            return np.zeros(0, dtype=np.int64), np.zeros(len(pks), dtype=bool)
        at = np.minimum(np.searchsorted(ordered, pks), len(ordered) - 1)
        held = ordered[at] == pks
        return order[at[held]], held


def local_clock(times: pd.Series, zones: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Local hour (with minutes as a fraction) and weekday in each post's zone."""
    hours = np.zeros(len(times))
    days = np.zeros(len(times), dtype=np.int64)
    for tz in zones.unique():
        mask = (zones == tz).to_numpy()
        local = times[mask].dt.tz_convert(str(tz))
        hours[mask] = (local.dt.hour + local.dt.minute / 60.0).to_numpy()
        days[mask] = local.dt.day_of_week.to_numpy()
    return hours, days


def build_view(store: Store, metric: str, *, with_vectors: bool, reference: bool = False) -> HistoryView:
    """The team's posts as a view for ``metric``; ``reference`` the reference
    accounts' posts instead (searched, never measured: no target)."""
    import pandas as pd

    frame = store.posts_frame(reference=reference)
    logs = np.log1p(target_values(frame, metric))
    codes = {h: i for i, h in enumerate(sorted(frame["account"].unique()))}
    vecs = (
        store.vectors(list(frame["vector_key"]))
        if with_vectors and len(frame)
        else np.zeros((len(frame), 0), dtype=np.float32)
    )
    # The keys were only needed for the vectors: a million of them hold 70 MB.
    frame = frame.drop(columns=["vector_key"])
    history = F.History(
        pk=frame["pk"].to_numpy(np.int64),
        # Seconds since the epoch, whatever resolution pandas chose for datetimes.
        time=(frame["posted_at"] - pd.Timestamp(0, tz="UTC")).dt.total_seconds().to_numpy(np.float64),
        account=frame["account"].map(codes).to_numpy(np.int64),
        log_target=logs,
        vectors=vecs,
    )
    hours, days = local_clock(frame["posted_at"], frame["timezone"])
    forms = np.array(
        [
            F.text_form(t, bool(lk), bool(md))
            for t, lk, md in zip(frame["text"], frame["has_link"], frame["has_media"], strict=True)
        ]
    ).reshape(len(frame), len(F.text_form("", False, False)))  # an empty view keeps its width
    zones = {codes[a]: str(z) for a, z in zip(frame["account"], frame["timezone"], strict=True)}
    return HistoryView(
        metric,
        frame,
        history,
        hours,
        days,
        forms,
        codes,
        zones,
        reference=reference,
    )


def feature_params(settings: Settings) -> F.FeatureParams:
    return F.FeatureParams(
        k=settings.neighbours,
        maturity_s=settings.maturity_hours * 3600.0,
        similar_threshold=settings.similar_threshold,
        baseline_n=settings.baseline_posts,
    )
