"""Per-class score distributions: binned counts of events and non-events.

Used by the score-distribution charts and (with fixed bins) by the drift
reference that a decision record stores. Counts are weighted when the data
carry weights; a count table contributes its per-score totals.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ClassHistogram", "class_histogram"]


@dataclass(frozen=True)
class ClassHistogram:
    """``edges`` (bins + 1), ``events`` and ``non_events`` (bins) weighted counts."""

    edges: np.ndarray
    events: np.ndarray
    non_events: np.ndarray
    below: float = 0.0   # weight of scores under the first edge, counted in the first bin
    above: float = 0.0   # weight of scores over the last edge, counted in the last bin

    @property
    def centers(self) -> np.ndarray:
        return self.edges[1:] / 2.0 + self.edges[:-1] / 2.0  # no overflow near +-1.8e308

    @property
    def widths(self) -> np.ndarray:
        return np.diff(self.edges)


def class_histogram(dataset, bins: int = 60, edges=None) -> ClassHistogram:
    """Binned event and non-event counts of a :class:`core.dataset.Dataset`.

    ``edges`` fixes the bins (a drift check needs the reference's bins);
    otherwise ``bins`` equal-width bins span the score range. Bins are closed
    on the left except the last, as ``numpy.histogram``. With fixed edges,
    scores outside them count in the outer bins and their weight is reported
    as ``below`` / ``above``: nothing is dropped.
    """
    s = dataset.y_score
    if dataset.kind == "counts":
        w_pos, w_neg = dataset.events, dataset.non_events
    else:
        w = np.ones_like(s) if dataset.sample_weight is None else dataset.sample_weight
        w_pos = np.where(dataset.y_true, w, 0.0)
        w_neg = w - w_pos
    if edges is None:
        lo, hi = float(s.min()), float(s.max())
        if hi <= lo:
            with np.errstate(over="ignore"):
                hi = lo + 1.0 if lo + 1.0 > lo else float(np.nextafter(lo, np.inf))
            if not np.isfinite(hi):  # lo is the largest float
                lo, hi = float(np.nextafter(lo, -np.inf)), lo
        # lo*(1-t) + hi*t stays finite where hi - lo overflows (scores near +-1.8e308)
        t = np.linspace(0.0, 1.0, int(bins) + 1)
        edges = np.maximum.accumulate(lo * (1.0 - t) + hi * t)
        edges[0], edges[-1] = lo, hi
    edges = np.asarray(edges, dtype=np.float64)
    w_all = w_pos + w_neg
    below = float(w_all[s < edges[0]].sum())
    above = float(w_all[s > edges[-1]].sum())
    # scores outside fixed edges are never dropped: they count in the outer bins (and are reported)
    clipped = np.clip(s, edges[0], edges[-1]) if (below or above) else s
    ev, _ = np.histogram(clipped, bins=edges, weights=w_pos)
    ne, _ = np.histogram(clipped, bins=edges, weights=w_neg)
    return ClassHistogram(edges=edges, events=ev, non_events=ne, below=below, above=above)
