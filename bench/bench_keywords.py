"""Keyword retrieval against vector retrieval, in time order (not part of the tests).

For every post in the later part of a history, the precedents' median (the
median log metric of the 10 best earlier posts settled before it) is taken
with precedents found by meaning (cosine of the stored vectors), by words
(BM25 over the keyword index) and by both (reciprocal rank fusion, k = 60),
and scored against the post's own metric: MAE(log) and Spearman, as the
backtest scores its simple forecasters. A fourth row is the median of the
earlier posts sharing one of the post's hashtags, scored on the posts that
have such earlier posts, beside the meaning median on those same posts.

The word statistics (document frequencies) come from the whole keyword
index, later posts' texts included; no later post's metric is ever used.

    python bench/bench_keywords.py [--source demo|realtext] [--rows 3000] [--seed 0] [--json out.json]
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

os.environ.setdefault("HF_HUB_OFFLINE", "1")
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from models.embedding import Embedder
from models.evaluation import mae, spearman
from service.history.fusion import rrf
from service.settings import Settings
from service.storage import keywords
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[1]
K = 10
DEPTH = 50


def load(home: Path, source: str, rows: int, seed: int) -> Workspace:
    ws = Workspace(settings=Settings(home=home), embedder=Embedder())
    if source == "demo":
        ws.import_csv(ROOT / "demo_data" / "posts.csv")
    else:
        sys.path.insert(0, str(ROOT / "bench"))
        from bench_realtext import canonical_csv

        path = home / "realtext.csv"
        canonical_csv(path, rows=rows, seed=seed)
        ws.import_csv(path)
    return ws


def run(ws: Workspace, metric: str = "impressions", later: float = 0.5) -> dict[str, object]:
    df = ws.store.posts_frame().dropna(subset=[metric]).sort_values(["posted_at", "pk"])
    pk = df["pk"].to_numpy(dtype=np.int64)
    y = np.log1p(df[metric].to_numpy(dtype=float))
    t = df["posted_at"].to_numpy()
    texts = df["text"].tolist()
    vecs = ws.store.vectors(df["vector_key"].tolist())
    settle = np.timedelta64(int(ws.settings.maturity_hours * 3600), "s")
    tags = [set(keywords.hashtags(x)) for x in texts]
    first = int(len(df) * (1 - later))
    pos_of = {int(p): i for i, p in enumerate(pk)}
    out: dict[str, list[float]] = {"y": [], "meaning": [], "words": [], "both": []}
    tag_y: list[float] = []
    tag_pred: list[float] = []
    tag_meaning: list[float] = []
    started = time.perf_counter()
    with ws.store.engine.connect() as conn:
        for i in range(first, len(df)):
            m = int(np.searchsorted(t, t[i] - settle, side="right"))
            m = min(m, i)
            if m < K:
                continue
            sims = vecs[:m] @ vecs[i]
            by_meaning = list(np.argsort(-sims, kind="stable")[:DEPTH])
            hits = keywords.search(conn, texts[i], DEPTH, allowed_pks=pk[:m].tolist())
            by_words = [pos_of[p] for p, _ in hits]
            fused = [r for r, _ in rrf([by_meaning, by_words])]
            med_meaning = float(np.median(y[by_meaning[:K]]))
            out["y"].append(y[i])
            out["meaning"].append(med_meaning)
            # Too few posts share a word: the meaning median stands in, as a
            # feature would fall back.
            out["words"].append(float(np.median(y[by_words[:K]])) if len(by_words) >= 3 else med_meaning)
            out["both"].append(float(np.median(y[fused[:K]])))
            if tags[i]:
                sharing = [j for j in range(m) if tags[j] & tags[i]]
                if sharing:
                    tag_y.append(y[i])
                    tag_pred.append(float(np.median(y[sharing])))
                    tag_meaning.append(med_meaning)
    yy = np.asarray(out["y"])
    report: dict[str, object] = {
        "posts_scored": len(yy),
        "seconds": round(time.perf_counter() - started, 1),
        "precedents_median": {
            name: {
                "mae_log": round(mae(yy, np.asarray(out[name])), 4),
                "spearman": round(spearman(yy, np.asarray(out[name])), 4),
            }
            for name in ("meaning", "words", "both")
        },
    }
    if len(tag_y) >= 10:
        ty = np.asarray(tag_y)
        report["sharing_hashtags"] = {
            "posts_scored": len(ty),
            "hashtag_median": {
                "mae_log": round(mae(ty, np.asarray(tag_pred)), 4),
                "spearman": round(spearman(ty, np.asarray(tag_pred)), 4),
            },
            "meaning_median_same_posts": {
                "mae_log": round(mae(ty, np.asarray(tag_meaning)), 4),
                "spearman": round(spearman(ty, np.asarray(tag_meaning)), 4),
            },
        }
    return report


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--source", choices=("demo", "realtext"), default="demo")
    ap.add_argument("--rows", type=int, default=3000)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--json", type=Path)
    a = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        ws = load(Path(tmp) / "home", a.source, a.rows, a.seed)
        try:
            report = {"source": a.source, "rows": a.rows, "seed": a.seed, **run(ws)}
        finally:
            ws.close()
    text = json.dumps(report, indent=2)
    print(text)
    if a.json:
        a.json.write_text(text + "\n")


if __name__ == "__main__":
    main()
