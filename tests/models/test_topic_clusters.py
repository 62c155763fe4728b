"""Topics found without phrases: on the demo generator's history, whose true
topics are known (demo_data/truth.csv), the clusters agree with them; each
name is distinctive by class-based TF-IDF and the statistics are the
segments' own."""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import pytest
from conftest import NOW
from sklearn.metrics import normalized_mutual_info_score

from models.topic_clusters import class_tfidf
from service.analysis.topics import topic_map, topics

TRUTH = Path(__file__).resolve().parents[2] / "demo_data" / "truth.csv"


def test_found_topics_agree_with_the_generators(demo_workspace) -> None:
    a = topics(demo_workspace, now=NOW)
    truth = {r["post_id"]: r["topic"] for r in csv.DictReader(TRUTH.open(encoding="utf-8"))}
    pairs = [(truth[pid], t.name) for t in a.topics for pid in t.post_ids if pid in truth]
    assert len(pairs) == a.n_posts  # every post is in one topic
    want, got = zip(*pairs, strict=True)
    # scikit-learn's NMI, an outside check of the clustering.
    assert normalized_mutual_info_score(want, got) >= 0.6
    assert a.k == max(a.silhouettes, key=lambda k: a.silhouettes[k])
    assert sum(t.n for t in a.topics) == a.n_posts
    assert len({t.name for t in a.topics}) == a.k
    for t in a.topics:
        assert t.name.split()[: len(t.words)] == t.words
        assert t.central and all(c.post_id in t.post_ids for c in t.central)
    assert "association" in a.note


def test_class_tfidf_is_the_published_formula() -> None:
    docs = ["tulips tulips garden", "garden shop", "shop gift gift"]
    labels = np.array([0, 1, 1])
    vocab, w = class_tfidf(docs, labels, 2)
    # Grootendorst (2022) eq. 1 by hand: class 0 has 3 words, class 1 has 5; A = 4.
    # tulips: tf 2/3 in class 0, f = 2 -> 2/3 * log(1 + 4/2).
    assert w[0, vocab.index("tulips")] == pytest.approx(2 / 3 * math.log(3))
    # garden: 1/3 in class 0, f = 2; gift: 2/5 in class 1, f = 2.
    assert w[0, vocab.index("garden")] == pytest.approx(1 / 3 * math.log(3))
    assert w[1, vocab.index("gift")] == pytest.approx(2 / 5 * math.log(3))
    assert w[1, vocab.index("tulips")] == 0


def test_map_is_a_pca_projection(demo_workspace) -> None:
    m = topic_map(demo_workspace, now=NOW)
    xy = np.array([[p.x, p.y] for p in m.points])
    # PCA axes are centred and uncorrelated (the projection's definition).
    assert np.abs(xy.mean(axis=0)).max() < 1e-6
    assert abs(np.corrcoef(xy.T)[0, 1]) < 1e-6
    assert m.explained[0] >= m.explained[1] > 0
    assert "approximate" in m.note and "PCA" in m.projection
