"""Which selection method to use in a situation (preliminary)."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Recommendation:
    method: str
    reason: str


def recommend_method(outside_share: float, n_existing: int, *,
                     references_known: bool) -> Recommendation:
    if n_existing == 0 or not references_known:
        return Recommendation("ks-augment", "first calibration")
    if outside_share >= 0.05:
        return Recommendation("outside-first", "outside")
    return Recommendation("ks-augment", "inside")
