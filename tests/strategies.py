"""Hypothesis strategies shared by the test suite."""

from __future__ import annotations

from hypothesis import strategies as st

from oracle import Instance


@st.composite
def instances(
    draw, kind: str = "threshold", max_sources: int = 4, max_items: int = 6, shared: bool | None = None, n_classes: int = 2
):
    """A small batch with integer item and source weights and, unless ``shared``, partial coverage,
    over ``n_classes`` classes (few distinct values, so exact ties are common)."""
    n_items = draw(st.integers(2, max_items))
    n_sources = draw(st.integers(1, max_sources))
    shared = draw(st.booleans()) if shared is None else shared
    labels = {}
    for s in range(n_sources):
        if shared:
            covered = list(range(n_items))
        else:
            covered = sorted(draw(st.sets(st.integers(0, n_items - 1), min_size=1, max_size=n_items)))
        labels[f"src-{s}"] = {j: draw(st.integers(0, n_classes - 1)) for j in covered}
    features, listed = {}, {}
    if kind == "threshold":
        for name in ("moisture_pct", "falling_number_s"):
            features[name] = tuple(draw(st.lists(st.sampled_from([10.0, 12.5, 14.0, 15.5]), min_size=n_items, max_size=n_items)))
        if len(set(features["moisture_pct"])) == 1 and len(set(features["falling_number_s"])) == 1:
            features["moisture_pct"] = (10.0,) + (14.0,) * (n_items - 1)
    if kind == "listed":
        n_rules = draw(st.integers(1, 5))
        for k in range(n_rules):
            if n_classes == 2:
                listed[f"r{k}"] = tuple(draw(st.lists(st.booleans(), min_size=n_items, max_size=n_items)))
            else:
                column = st.lists(st.integers(0, n_classes - 1), min_size=n_items, max_size=n_items)
                listed[f"r{k}"] = tuple(draw(column))
    return Instance(
        n_items=n_items,
        labels=labels,
        source_weights={f"src-{s}": draw(st.integers(1, 4)) for s in range(n_sources)},
        item_weights=tuple(draw(st.lists(st.integers(1, 3), min_size=n_items, max_size=n_items))),
        features=features,
        listed=listed,
        n_classes=n_classes,
    )
