"""Topics found in the post vectors without phrases: k-means on the unit
vectors, the number of clusters chosen by the mean silhouette (cosine) over a
small range, each cluster named by its most distinctive words (class-based
TF-IDF, Grootendorst 2022, "BERTopic", eq. 1):

    W(t, c) = tf(t, c) * log(1 + A / f(t))

where tf(t, c) is how often word t appears in cluster c's posts (as a share
of the cluster's words), f(t) how often it appears in all posts, and A the
mean number of words per cluster.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Sequence

import numpy as np

from models.errors import InputError, NotFittedError

#: The range of cluster counts tried, and the most posts the silhouette is scored on.
DEFAULT_K_RANGE: tuple[int, int] = (2, 10)
SILHOUETTE_SAMPLE = 2000
NAME_WORDS = 3

_WORD = re.compile(r"[a-z][a-z'\-]{2,}")
_URL = re.compile(r"https?://\S+|www\.\S+")


def words(text: str, stop: frozenset[str]) -> list[str]:
    """A post's words for naming: lower case, no links, no stop words."""
    return [w.strip("'-") for w in _WORD.findall(_URL.sub(" ", text.lower())) if w not in stop]


def class_tfidf(docs: Sequence[str], labels: np.ndarray, n_classes: int) -> tuple[list[str], np.ndarray]:
    """Vocabulary and the (n_classes, n_words) c-TF-IDF matrix."""
    from sklearn.feature_extraction.text import ENGLISH_STOP_WORDS

    stop = frozenset(ENGLISH_STOP_WORDS)
    counts = [Counter[str]() for _ in range(n_classes)]
    for text, c in zip(docs, labels, strict=True):
        counts[int(c)].update(words(text, stop))
    vocab = sorted(set().union(*counts))
    col = {w: j for j, w in enumerate(vocab)}
    tf = np.zeros((n_classes, len(vocab)))
    for c, cnt in enumerate(counts):
        for w, k in cnt.items():
            tf[c, col[w]] = k
    per_class = tf.sum(axis=1, keepdims=True)
    avg_words = float(per_class.mean())
    freq = tf.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(per_class > 0, tf / per_class, 0.0)
    return vocab, share * np.log1p(avg_words / np.maximum(freq, 1.0))


class TopicClusterer:
    """k-means on unit vectors with k chosen by the silhouette."""

    def __init__(self, *, k_range: tuple[int, int] = DEFAULT_K_RANGE, seed: int = 0) -> None:
        self.k_range = k_range
        self.seed = seed

    def fit(self, vectors: np.ndarray) -> TopicClusterer:
        from sklearn.cluster import KMeans
        from sklearn.metrics import silhouette_score

        x = np.asarray(vectors, dtype=np.float64)
        if x.ndim != 2 or x.shape[0] < 10:
            raise InputError("topics need at least 10 posts with vectors", field="posts")
        lo, hi = self.k_range
        if not 2 <= lo <= hi:
            raise InputError("k_range must be two whole numbers 2 <= low <= high", field="k_range")
        hi = min(hi, x.shape[0] - 1)
        scores: dict[int, float] = {}
        fits = {}
        for k in range(lo, hi + 1):
            km = KMeans(n_clusters=k, n_init=3, random_state=self.seed).fit(x)
            size = min(SILHOUETTE_SAMPLE, x.shape[0])
            scores[k] = float(
                silhouette_score(x, km.labels_, metric="cosine", sample_size=size, random_state=self.seed)
            )
            fits[k] = km
        best = max(scores, key=lambda k: (scores[k], -k))
        km = fits[best]
        self.silhouettes_ = scores
        self.k_ = best
        self.labels_ = km.labels_.astype(np.int64)
        centres = km.cluster_centers_
        self.centres_ = centres / np.maximum(np.linalg.norm(centres, axis=1, keepdims=True), 1e-12)
        return self

    def names(self, docs: Sequence[str], *, n_words: int = NAME_WORDS) -> list[list[str]]:
        """Each cluster's most distinctive words, best first."""
        if not hasattr(self, "labels_"):
            raise NotFittedError("fit the clusterer first")
        vocab, weight = class_tfidf(docs, self.labels_, self.k_)
        out = []
        for c in range(self.k_):
            order = np.argsort(-weight[c], kind="stable")[:n_words]
            out.append([vocab[j] for j in order if weight[c, j] > 0])
        return out


def unique_names(word_lists: Sequence[Sequence[str]]) -> list[str]:
    """Phrases from the word lists, made unique by adding a number."""
    out: list[str] = []
    for i, ws in enumerate(word_lists):
        name = " ".join(ws) or f"topic {i + 1}"
        base, n = name, 2
        while name in out or name == "other":
            name, n = f"{base} {n}", n + 1
        out.append(name)
    return out


def log_colour(values: np.ndarray) -> np.ndarray:
    """log10(value + 1), the map's colour scale."""
    return np.log10(np.maximum(np.asarray(values, dtype=np.float64), 0.0) + 1.0)


__all__ = ["TopicClusterer", "class_tfidf", "log_colour", "unique_names", "words"]
