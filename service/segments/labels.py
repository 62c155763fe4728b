"""A split by one of the team's own labels (``segments --by label:campaign``):
each value of the label a segment, the posts without it one more.

Labels are the export's extra columns kept at import (``--label``,
service.storage.labels); the segments they give are compared with the same
statistics as every other split (models.segments).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from models.errors import NotFound
from service.segments.request import LABEL_BY, NO_LABEL
from service.storage.store import Store

if TYPE_CHECKING:
    import pandas as pd


def by_label(store: Store, frame: pd.DataFrame, name: str) -> tuple[np.ndarray, list[str], str]:
    """Each post's value of label ``name`` (NO_LABEL where it has none), the
    segments' order (values alphabetically, NO_LABEL last) and the split's title."""
    values = store.labels_of(name)
    if not values:
        known = store.label_names()
        # A label no post carries is an unknown name, like an unknown account.
        raise NotFound(
            f"no post has a label {name!r}",
            field="by",
            value=f"{LABEL_BY}{name}",
            hint=(
                f"labels kept: {', '.join(known)}"
                if known
                else f"keep one at import: sounding import FILE --label {name}"
            ),
        )
    labels = np.asarray([values.get(int(pk), NO_LABEL) for pk in frame["pk"]], dtype=object)
    found = sorted({v for v in labels if v != NO_LABEL}, key=lambda v: (v.casefold(), v))
    return labels, [*found, NO_LABEL], f"label {name} ({NO_LABEL}: posts without it)"
