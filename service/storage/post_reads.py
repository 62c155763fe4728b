"""Reading the history: posts as a frame or by row id, vectors, and what the index is built from."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from datetime import datetime
from typing import TYPE_CHECKING, Any

import numpy as np
from sqlalchemy import func, select

from models.errors import StoreError
from models.index import fingerprint
from models.metrics import METRIC_COLUMNS
from service.clock import as_utc, to_naive_utc
from service.storage.accounts import AccountRecords

if TYPE_CHECKING:
    # pandas loads when posts are first read as a frame, not with the store.
    import pandas as pd
from service.storage.tables import (
    Account,
    Post,
    Snapshot,
    Vector,
)

_FRAME_CHUNK = 100_000  # rows typed at a time by Store.posts_frame


def _posts_part(rows: Sequence[Any], columns: list[str]) -> pd.DataFrame:
    """One chunk of ``Store.posts_frame``'s rows as a typed frame."""
    import pandas as pd

    df = pd.DataFrame(rows, columns=columns)
    df["posted_at"] = pd.to_datetime(df["posted_at"], utc=True)
    for m in METRIC_COLUMNS:
        df[m] = pd.to_numeric(df[m], errors="coerce").astype("float64")
    df["pk"] = df["pk"].astype("int64")
    df["has_link"] = df["has_link"].astype(bool)
    df["has_media"] = df["has_media"].astype(bool)
    df["reference"] = df["reference"].astype(bool)
    return df


class PostReads(AccountRecords):
    """A store's reads of posts and vectors."""

    def missing_vectors(self, keys: Iterable[str]) -> set[str]:
        wanted = set(keys)
        found: set[str] = set()
        with self.session() as s:
            ks = list(wanted)
            for i in range(0, len(ks), 900):  # SQLite's variable limit
                found.update(s.scalars(select(Vector.key).where(Vector.key.in_(ks[i : i + 900]))))
        return wanted - found

    def vectors(self, keys: Sequence[str]) -> np.ndarray:
        """Vectors for ``keys`` in the given order.

        Rows are written into one array as they are read, so a million
        vectors (1.5 GB) are held once, not once as fetched bytes and again
        when stacked."""
        uniq = list(dict.fromkeys(keys))
        at = {k: i for i, k in enumerate(uniq)}
        result: np.ndarray | None = None
        got = np.zeros(len(uniq), dtype=bool)
        with self.session() as s:
            if not uniq:
                # No rows; their width is that of the stored vectors (0 in an empty store).
                width = s.execute(select(Vector.dim).limit(1)).scalar()
                return np.zeros((0, int(width or 0)), dtype=np.float32)
            for i in range(0, len(uniq), 900):
                for k, dim, data in s.execute(
                    select(Vector.key, Vector.dim, Vector.data).where(Vector.key.in_(uniq[i : i + 900]))
                ):
                    if result is None:
                        result = np.empty((len(uniq), dim), dtype=np.float32)
                    j = at[k]
                    result[j] = np.frombuffer(data, dtype=np.float32, count=dim)
                    got[j] = True
        if result is None or not got.all():
            raise StoreError(f"{len(uniq) - int(got.sum())} vectors are missing from the store")
        if len(uniq) == len(keys):
            return result
        return result[[at[k] for k in keys]]

    def index_pairs(self) -> list[tuple[int, str]]:
        """(post row id, vector key) of every post: what the index must hold."""
        with self.session() as s:
            return [(int(a), b) for a, b in s.execute(select(Post.id, Post.vector_key))]

    def index_data(self) -> tuple[np.ndarray, np.ndarray, str]:
        """Post row ids, their vectors and the fingerprint, for a rebuild."""
        pairs = self.index_pairs()
        ids = np.array([p for p, _ in pairs], dtype=np.int64)
        vecs = self.vectors([k for _, k in pairs])
        return ids, vecs, fingerprint(pairs)

    def fingerprint(self) -> str:
        return fingerprint(self.index_pairs())

    def posts_frame(self, *, account: str | None = None, reference: bool | None = False) -> pd.DataFrame:
        """Every post of the team's accounts with its current metrics, one row
        a post, oldest first; ``reference=True`` the reference accounts' posts
        instead (their metrics blank), None both.

        Columns: pk, account, timezone, post_id, text, posted_at (aware UTC),
        has_link, has_media, vector_key, one column per metric and followers
        (the account's count in force at the post's time, NaN where none is
        known: service.storage.followers).
        """
        latest = (
            select(Snapshot.post_pk, func.max(Snapshot.id).label("sid")).group_by(Snapshot.post_pk).subquery()
        )
        q = (
            select(
                Post.id.label("pk"),
                Account.handle.label("account"),
                Account.timezone,
                Post.post_id,
                Post.text,
                Post.posted_at,
                Post.has_link,
                Post.has_media,
                Post.vector_key,
                *[getattr(Snapshot, m) for m in METRIC_COLUMNS],
                Account.reference.label("reference"),
            )
            .join(Account, Account.id == Post.account_id)
            .outerjoin(latest, latest.c.post_pk == Post.id)
            .outerjoin(Snapshot, Snapshot.id == latest.c.sid)
            .order_by(Post.posted_at, Post.id)
        )
        if account is not None:
            self.account(account)
            q = q.where(Account.handle == account)
        if reference is not None:
            q = q.where(Account.reference.is_(reference))
        df = self._frame_of(q)
        if reference is not False and len(df):
            # A peer's numbers are never read, even where its export had them.
            df.loc[df["reference"].to_numpy(bool), list(METRIC_COLUMNS)] = np.nan
        df = df.drop(columns=["reference"])
        seconds = df["posted_at"].astype("datetime64[us, UTC]").astype("int64").to_numpy() / 1e6
        df["followers"] = self.followers_at(df["account"].to_numpy(object), seconds)
        return df

    def _frame_of(self, q: Any) -> pd.DataFrame:
        import pandas as pd

        # Rows are read and typed a chunk at a time: a million rows fetched at
        # once as Python objects hold about 2 GB for a frame of 360 MB.
        with self.session() as s:
            result = s.execute(q.execution_options(yield_per=_FRAME_CHUNK))
            columns = list(result.keys())  # the labels of the select above
            parts = [_posts_part(chunk, columns) for chunk in result.partitions()]
        if not parts:
            return _posts_part([], columns)
        if len(parts) == 1:
            return parts[0]
        df = pd.concat(parts, ignore_index=True)
        # concat keeps each chunk's strings as a piece of their own, and every
        # later row look-up visits all pieces (10 ms a column at a million
        # rows, on each forecast's precedents): one piece per column.
        # (Arrow-backed strings only, through the Arrow interchange protocol;
        # strings held as Python objects have no pieces.)
        for c in df.columns:
            to_arrow = getattr(df[c].array, "__arrow_array__", None)
            if isinstance(df[c].dtype, pd.StringDtype) and to_arrow is not None:
                df[c] = pd.array(to_arrow().combine_chunks(), dtype=df[c].dtype)
        return df

    def posts_by_pk(self, pks: Sequence[int]) -> dict[int, dict[str, Any]]:
        """Posts with current metrics for the given row ids (precedent details)."""
        if not len(pks):
            return {}
        latest = (
            select(Snapshot.post_pk, func.max(Snapshot.id).label("sid"))
            .where(Snapshot.post_pk.in_(list(pks)))
            .group_by(Snapshot.post_pk)
            .subquery()
        )
        # Columns, not mapped objects: building ORM instances for 20 posts
        # cost more than the rest of a served forecast's store reads.
        q = (
            select(
                Post.id,
                Post.post_id,
                Account.handle,
                Post.text,
                Post.posted_at,
                Post.has_link,
                Post.has_media,
                Account.reference,
                latest.c.sid,
                *(getattr(Snapshot, m) for m in METRIC_COLUMNS),
            )
            .join(Account, Account.id == Post.account_id)
            .outerjoin(latest, latest.c.post_pk == Post.id)
            .outerjoin(Snapshot, Snapshot.id == latest.c.sid)
            .where(Post.id.in_(list(pks)))
        )
        out: dict[int, dict[str, Any]] = {}
        with self.session() as s:
            for pk, post_id, handle, text, posted_at, link, media, reference, sid, *values in s.execute(q):
                # A peer's numbers are never read; a post without a snapshot has none.
                shown = sid is not None and not reference
                out[pk] = {
                    "pk": pk,
                    "post_id": post_id,
                    "account": handle,
                    "text": text,
                    "posted_at": as_utc(posted_at),
                    "has_link": link,
                    "has_media": media,
                    "metrics": {m: v if shown else None for m, v in zip(METRIC_COLUMNS, values, strict=True)},
                    "reference": bool(reference),
                }
        if out:
            counts = self.followers_at(
                [d["account"] for d in out.values()], [d["posted_at"].timestamp() for d in out.values()]
            )
            for d, n in zip(out.values(), counts.tolist(), strict=True):
                d["followers"] = None if n != n else int(n)
        return out

    def pks_where(
        self,
        *,
        account: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
        reference: bool | None = None,
    ) -> np.ndarray:
        """Row ids of posts of one account and/or inside a date range (and of
        the reference accounts only, or of the team's only)."""
        q = select(Post.id)
        if account is not None or reference is not None:
            q = q.join(Account, Account.id == Post.account_id)
        if account is not None:
            self.account(account)
            q = q.where(Account.handle == account)
        if reference is not None:
            q = q.where(Account.reference.is_(reference))
        if since is not None:
            q = q.where(Post.posted_at >= to_naive_utc(since))
        if until is not None:
            q = q.where(Post.posted_at <= to_naive_utc(until))
        with self.session() as s:
            return np.array(list(s.scalars(q)), dtype=np.int64)
