"""kNN predictions against scikit-learn's KNeighborsRegressor with the same scaling.

Reference: ``sklearn.neighbors.KNeighborsRegressor`` in a ``Pipeline`` with
``StandardScaler`` / ``MinMaxScaler`` (our ``standard`` / ``range`` scales) or none.
Continuous random features, so there are no distance ties (with ties the two differ by design:
we share tied neighbors out; scikit-learn keeps whichever its tree returns).
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.neighbors import KNeighborsRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import MinMaxScaler, StandardScaler

from nearwise.core.methods.knn import KNN

SCALERS = {"standard": StandardScaler, "range": MinMaxScaler, "none": None}


@pytest.mark.parametrize("weights", ["uniform", "distance"])
@pytest.mark.parametrize("scale", ["standard", "range", "none"])
@pytest.mark.parametrize("k", [1, 7, 40])
def test_predictions_equal_kneighbors_regressor(weights, scale, k):
    rng = np.random.default_rng(3)
    X = rng.normal(size=(200, 3)) * [1.0, 10.0, 0.1]
    y = X[:, 0] + np.sin(X[:, 1]) + rng.normal(0, 0.1, 200)
    Xq = rng.normal(size=(30, 3)) * [1.0, 10.0, 0.1]
    ours = KNN().fit(X, y, {"weights": weights, "scale": scale}, k)
    steps = [SCALERS[scale]()] if SCALERS[scale] else []
    ref = make_pipeline(*steps, KNeighborsRegressor(n_neighbors=k, weights=weights)).fit(X, y)
    # Same arithmetic up to summation order: a few ulps.
    assert_allclose(ours.predict(Xq), ref.predict(Xq), rtol=1e-12, atol=1e-12)
