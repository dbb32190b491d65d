"""Per-process caches of judgements, one per deck layer."""

from __future__ import annotations

from pitchguard.deck import LayerRule

LAYERS_KEPT = 8
"""Deck layers whose caches a store keeps (the oldest is dropped beyond)."""


def layer_cache(store: dict, rule: LayerRule) -> dict:
    """The cache kept for ``rule`` in ``store``, for the life of the process (tiles of
    one scan share it).  Keyed by the layer's identity; the layer is kept beside
    its cache so that its id cannot be reused by another while the entry lives."""
    hit = store.get(id(rule))
    if hit is None or hit[0] is not rule:
        if len(store) >= LAYERS_KEPT:
            store.pop(next(iter(store)))
        hit = store[id(rule)] = (rule, {})
    return hit[1]
