"""The keyword index: each post's words beside its vector, ranked by BM25.

Short posts carry meaning in hashtags, mentions, place names and numbers that
a small sentence model blurs, so precedents can also be found by the words
they share with a draft. The words are our own tokens (``words``), stored
space-separated, so both backends see exactly the same terms:

- SQLite: an FTS5 table ``post_words`` (rowid = the post's row id) whose
  tokenizer splits on spaces only (unicode61 with every category but
  separators as token characters), ranked by FTS5's own ``bm25()``;
- PostgreSQL: a table ``post_words`` with a ``tsvector`` (built from the
  tokens as they are, with positions) under a GIN index; matching posts are
  found through the index and scored by the same BM25 from term statistics.

Both give the Okapi BM25 of Robertson & Spärck Jones as FTS5 documents it
(k1 = 1.2, b = 0.75; idf = ln((N - n + 0.5) / (n + 0.5)), a non-positive idf
taken as 1e-6), positive, higher is better. The index is written in the same
transaction as the posts (``Store.write_batch``, ``Store.forget``) and built
for older stores by a migration step (``rebuild``).
"""

from __future__ import annotations

import math
import re
import unicodedata
from collections.abc import Iterable, Sequence

from sqlalchemy import Connection, bindparam, text

TABLE = "post_words"
K1, B = 1.2, 0.75
#: Longest token kept (PostgreSQL lexemes have a limit; no real word is longer).
MAX_TOKEN = 100

# Hashtags and mentions keep their sign; numbers keep inner separators and a
# percent sign (1,200  3.5  40%); everything else is runs of word characters.
_TOKEN = re.compile(r"[#@]\w+|\d+(?:[.,]\d+)*%?|\w+")
# SQLite's unicode61 with every category except separators (Z*) as token
# characters: it splits on the spaces between our tokens and nowhere else.
_FTS5_TOKENIZE = "unicode61 remove_diacritics 0 categories 'L* M* N* P* S* C*'"
_CHUNK = 900  # SQLite's variable limit


def words(text_: str) -> list[str]:
    """The tokens of a text, in order: case-folded (NFKC), hashtags as
    ``#tag``, mentions as ``@name``, numbers as written (``3.5``, ``40%``)."""
    folded = unicodedata.normalize("NFKC", text_).casefold()
    return [t[:MAX_TOKEN] for t in _TOKEN.findall(folded)]


def hashtags(text_: str) -> list[str]:
    """The distinct hashtags of a text, in order (``#seedswap``)."""
    return list(dict.fromkeys(t for t in words(text_) if t.startswith("#")))


# Writing ---------------------------------------------------------------------


def create(conn: Connection) -> None:
    """Create the keyword index if it is missing (empty)."""
    if conn.dialect.name == "postgresql":
        conn.execute(
            text(
                f"CREATE TABLE IF NOT EXISTS {TABLE} ("
                " post_pk INTEGER PRIMARY KEY REFERENCES posts(id) ON DELETE CASCADE,"
                " length INTEGER NOT NULL, words TSVECTOR NOT NULL)"
            )
        )
        conn.execute(text(f"CREATE INDEX IF NOT EXISTS ix_{TABLE}_words ON {TABLE} USING GIN (words)"))
    else:
        conn.execute(
            text(f'CREATE VIRTUAL TABLE IF NOT EXISTS {TABLE} USING fts5(words, tokenize="{_FTS5_TOKENIZE}")')
        )


def remove(conn: Connection, pks: Sequence[int]) -> None:
    """Take posts (row ids) out of the keyword index."""
    key = "post_pk" if conn.dialect.name == "postgresql" else "rowid"
    stmt = text(f"DELETE FROM {TABLE} WHERE {key} IN :pks").bindparams(bindparam("pks", expanding=True))
    for i in range(0, len(pks), _CHUNK):
        conn.execute(stmt, {"pks": [int(p) for p in pks[i : i + _CHUNK]]})


def add(conn: Connection, posts: Iterable[tuple[int, str]]) -> None:
    """Index (post row id, text) pairs, replacing what a post had."""
    items = [(int(pk), words(t)) for pk, t in posts]
    if not items:
        return
    remove(conn, [pk for pk, _ in items])
    if conn.dialect.name == "postgresql":
        conn.execute(
            text(f"INSERT INTO {TABLE} (post_pk, length, words) VALUES (:pk, :n, CAST(:v AS tsvector))"),
            [{"pk": pk, "n": len(toks), "v": _tsvector(toks)} for pk, toks in items],
        )
    else:
        conn.execute(
            text(f"INSERT INTO {TABLE} (rowid, words) VALUES (:pk, :v)"),
            [{"pk": pk, "v": " ".join(toks)} for pk, toks in items],
        )


def rebuild(conn: Connection) -> int:
    """Build the keyword index afresh from the posts table; returns the posts indexed."""
    create(conn)
    conn.execute(text(f"DELETE FROM {TABLE}"))
    rows = conn.execute(text("SELECT id, text FROM posts ORDER BY id")).all()
    for i in range(0, len(rows), 1000):
        add(conn, [(int(r[0]), str(r[1])) for r in rows[i : i + 1000]])
    return len(rows)


def _quote(token: str, mark: str) -> str:
    return mark + token.replace(mark, mark + mark) + mark


def _tsvector(tokens: Sequence[str]) -> str:
    """A tsvector literal of the tokens as they are (no parser, no stemming),
    with positions (1-based, as PostgreSQL counts; it keeps up to 256 each)."""
    at: dict[str, list[int]] = {}
    for i, t in enumerate(tokens, start=1):
        at.setdefault(t, []).append(min(i, 16383))
    return " ".join(
        _quote(t.replace("\\", "\\\\"), "'") + ":" + ",".join(map(str, p[:256])) for t, p in at.items()
    )


# Searching -------------------------------------------------------------------


def search(
    conn: Connection, query: str, k: int, *, allowed_pks: Sequence[int] | None = None
) -> list[tuple[int, float]]:
    """(post row id, BM25 score) of the ``k`` best posts for the words of
    ``query``, best first (ties by row id), optionally among ``allowed_pks``."""
    terms = list(dict.fromkeys(words(query)))
    if not terms or k < 1 or (allowed_pks is not None and len(allowed_pks) == 0):
        return []
    if conn.dialect.name == "postgresql":
        scored = _pg_scores(conn, terms)
    else:
        match = " OR ".join(_quote(t, '"') for t in terms)
        rows = conn.execute(
            text(f"SELECT rowid, -bm25({TABLE}) FROM {TABLE} WHERE {TABLE} MATCH :q"), {"q": match}
        ).all()
        scored = {int(pk): float(s) for pk, s in rows}
    if allowed_pks is not None:
        keep = {int(p) for p in allowed_pks}
        scored = {pk: s for pk, s in scored.items() if pk in keep}
    return sorted(scored.items(), key=lambda kv: (-kv[1], kv[0]))[:k]


def self_scores(conn: Connection, pks: Sequence[int]) -> dict[int, float]:
    """Each post's BM25 score for its own words as the query (post row id ->
    score; posts without words are left out): the most any query can score
    on that post, the yardstick of near-repeats by words."""
    out: dict[int, float] = {}
    for pk, toks in stored_words(conn, pks).items():
        terms = list(dict.fromkeys(toks))
        if not terms:
            continue
        if conn.dialect.name == "postgresql":
            score = _pg_scores(conn, terms).get(pk)
        else:
            score = conn.execute(
                text(f"SELECT -bm25({TABLE}) FROM {TABLE} WHERE {TABLE} MATCH :q AND rowid = :pk"),
                {"q": " OR ".join(_quote(t, '"') for t in terms), "pk": pk},
            ).scalar()
        if score is not None:
            out[pk] = float(score)
    return out


def stored_words(conn: Connection, pks: Sequence[int]) -> dict[int, list[str]]:
    """The indexed tokens of posts (row id -> tokens)."""
    if conn.dialect.name == "postgresql":
        stmt = text(
            f"SELECT w.post_pk, u.lexeme FROM {TABLE} w, unnest(w.words) u WHERE w.post_pk IN :pks"
        ).bindparams(bindparam("pks", expanding=True))
    else:
        stmt = text(f"SELECT rowid, words FROM {TABLE} WHERE rowid IN :pks").bindparams(
            bindparam("pks", expanding=True)
        )
    out: dict[int, list[str]] = {}
    for i in range(0, len(pks), _CHUNK):
        for pk, w in conn.execute(stmt, {"pks": [int(p) for p in pks[i : i + _CHUNK]]}):
            if conn.dialect.name == "postgresql":
                out.setdefault(int(pk), []).append(str(w))
            else:
                out[int(pk)] = [t for t in str(w).split(" ") if t]
    return out


def _pg_scores(conn: Connection, terms: list[str]) -> dict[int, float]:
    """BM25 of every post matching any term, from PostgreSQL's term statistics."""
    n_docs, total = conn.execute(text(f"SELECT count(*), coalesce(sum(length), 0) FROM {TABLE}")).one()
    if not n_docs:
        return {}
    tsquery = " | ".join(_quote(t.replace("\\", "\\\\"), "'") for t in terms)
    rows = conn.execute(
        text(
            f"SELECT w.post_pk, w.length, u.lexeme, coalesce(array_length(u.positions, 1), 1)"
            f" FROM {TABLE} w, unnest(w.words) u"
            " WHERE w.words @@ CAST(:q AS tsquery) AND u.lexeme IN :terms"
        ).bindparams(bindparam("terms", expanding=True)),
        {"q": tsquery, "terms": terms},
    ).all()
    found: dict[int, tuple[int, dict[str, int]]] = {}
    for pk, length, lexeme, tf in rows:
        found.setdefault(int(pk), (int(length), {}))[1][str(lexeme)] = int(tf)
    df: dict[str, int] = {}
    for _, tfs in found.values():
        for t in tfs:
            df[t] = df.get(t, 0) + 1
    return {
        pk: bm25(tfs, length, df, n_docs=int(n_docs), avgdl=float(total) / int(n_docs))
        for pk, (length, tfs) in found.items()
    }


def bm25(tfs: dict[str, int], length: int, df: dict[str, int], *, n_docs: int, avgdl: float) -> float:
    """Okapi BM25 of one document: ``tfs`` its frequency of each query term
    present, ``df`` each term's document frequency (FTS5's variant: a
    non-positive idf counts as 1e-6)."""
    score = 0.0
    norm = K1 * (1 - B + B * length / avgdl) if avgdl > 0 else K1
    for t, tf in tfs.items():
        idf = math.log((n_docs - df[t] + 0.5) / (df[t] + 0.5))
        score += (idf if idf > 0 else 1e-6) * tf * (K1 + 1) / (tf + norm)
    return score
