"""Per-class binned counts: equal numpy.histogram; nothing dropped outside fixed edges."""

import numpy as np

from core.dataset import Dataset
from core.summaries import class_histogram


def test_histogram_matches_numpy_and_keeps_out_of_range_scores():
    # Reference: numpy.histogram on each class (reference library).
    rng = np.random.default_rng(3)
    y = rng.random(5000) < 0.1
    s = rng.normal(y * 1.0, 1.0)
    ds = Dataset.from_arrays(y, s)
    h = class_histogram(ds, bins=20)
    ev, edges = np.histogram(s[y], bins=20, range=(s.min(), s.max()))
    np.testing.assert_array_equal(h.events, ev)
    np.testing.assert_allclose(h.edges, edges)
    assert h.events.sum() + h.non_events.sum() == 5000
    fixed = np.linspace(-1, 1, 11)
    g = class_histogram(ds, edges=fixed)
    assert g.events.sum() + g.non_events.sum() == 5000  # none dropped
    assert g.below == np.sum(s < -1) and g.above == np.sum(s > 1)
