"""How the methods see categorical features: treatment-coded designs and kNN's mixed distance.

``work["categories"]`` (a :class:`nearwise.core.categories.Categories`, or None) says which
columns of ``X`` hold level codes. Every helper here reduces to what the methods did before
when it is None, so that a request without categorical features is answered as it always was.

- **linear** (:class:`Design`, :func:`linear_terms`): the numeric features are standardized
  and expanded into the polynomial of the degree; the treatment dummies of every categorical
  feature are appended as linear terms, right after the intercept (so every degree's design is
  still a leading block of the top degree's: one QR serves the whole path). The dummies enter
  as 0/1, are never raised to a power and never multiply another term.
- **kNN** (:class:`MixedScaler`): squared distance = sum of squared differences of the scaled
  numeric features + gamma^2 for every categorical feature whose levels differ, the squared
  Euclidean form of Gower's (1971) mixed dissimilarity, in which a categorical mismatch counts
  as a fixed amount. It is built by appending one column per level, gamma / sqrt(2) where the
  row holds that level and 0 elsewhere: two rows with different levels differ in two such
  columns, (gamma / sqrt 2)^2 + (gamma / sqrt 2)^2 = gamma^2, so the k-d tree and every fast
  path of :mod:`nearwise.core.methods.knn` work unchanged.

References
----------
Gower, J. C. (1971). A general coefficient of similarity and some of its properties.
*Biometrics* 27(4), 857-871.
Chambers, J. M. & Hastie, T. J. (1992). *Statistical Models in S*, Wadsworth, section 2.3.2.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from nearwise.core.categories import MISMATCH, Categories
from nearwise.core.data import Scaler
from nearwise.core.methods.polynomial import monomials, weighted_scaler


def categories_of(work: Mapping[str, Any] | None) -> Categories | None:
    """The run's categorical features, ``work["categories"]`` (None: every feature numeric)."""
    return None if work is None else work.get("categories")


@dataclass(frozen=True)
class Design:
    """The linear methods' view of ``X``: standardized numeric features, then the dummies.

    ``shift`` and ``scale`` cover every column of :meth:`transform` (0 and 1 for the
    dummies), so that the raw-unit expansion of the polynomial leaves the dummies'
    coefficients as they are.
    """

    scaler: Scaler  # of the numeric features
    cats: Categories

    @property
    def shift(self) -> np.ndarray:
        return np.concatenate([self.scaler.shift, np.zeros(self.cats.n_dummies)])

    @property
    def scale(self) -> np.ndarray:
        return np.concatenate([self.scaler.scale, np.ones(self.cats.n_dummies)])

    def transform(self, X: np.ndarray) -> np.ndarray:
        Z = self.scaler.transform(X[:, list(self.cats.numeric)])
        return np.hstack([Z, self.cats.dummies(X)])

    def names(self, features: tuple[str, ...]) -> tuple[str, ...]:
        """The names of the columns of :meth:`transform`."""
        return (*(features[j] for j in self.cats.numeric), *self.cats.dummy_names())

    def owners(self) -> list[int]:
        """The feature (column of ``X``) each column of :meth:`transform` comes from."""
        out = list(self.cats.numeric)
        for c, j in enumerate(self.cats.positions):
            out += [j] * (len(self.cats.levels[c]) - 1)
        return out


def design_scaler(X: np.ndarray, cats: Categories | None, w: np.ndarray | None = None):
    """Standardization of the numeric features (weighted by ``w`` if given) and, with
    categorical features, their dummies: a :class:`Scaler` or a :class:`Design`."""
    if cats is None:
        return weighted_scaler(X, w) if w is not None else Scaler.fit(X, "standard")
    num = X[:, list(cats.numeric)]
    scaler = weighted_scaler(num, w) if w is not None else Scaler.fit(num, "standard")
    return Design(scaler, cats)


def linear_terms(
    cats: Categories | None, p: int, degree: int, interactions: bool
) -> list[tuple[int, ...]]:
    """Exponent vectors over the columns of :func:`design_scaler`'s transform: the intercept,
    one term per dummy, then the monomials of the numeric features by total degree."""
    if cats is None:
        return monomials(p, degree, interactions)
    q, z = len(cats.numeric), cats.n_dummies
    base = monomials(q, degree, interactions)
    pad = (0,) * z
    dummies = [(0,) * q + tuple(int(i == d) for i in range(z)) for d in range(z)]
    return [base[0] + pad, *dummies, *(e + pad for e in base[1:])]


def term_names(scaler, names: tuple[str, ...]) -> tuple[str, ...]:
    """Names of the design columns: the features' own, or with dummies ``column[level]``."""
    return scaler.names(names) if isinstance(scaler, Design) else names


def term_owners(scaler, p: int) -> list[int]:
    """The feature each design column comes from."""
    return scaler.owners() if isinstance(scaler, Design) else list(range(p))


@dataclass(frozen=True)
class MixedScaler:
    """kNN's scaling with categorical features: the scaled numeric features, then
    gamma / sqrt(2) in the column of each row's level (see the module notes)."""

    scaler: Scaler  # of the numeric features
    cats: Categories
    gamma: float

    @property
    def p_numeric(self) -> int:
        return len(self.cats.numeric)

    def transform(self, X: np.ndarray) -> np.ndarray:
        Z = self.scaler.transform(X[:, list(self.cats.numeric)])
        return np.hstack([Z, self.cats.onehot(X, self.gamma / np.sqrt(2.0))])


def knn_scaler(X: np.ndarray, scale: str, cats: Categories | None, gamma: float | None = None):
    """kNN's scaling: a :class:`Scaler` of every feature, or with categorical features a
    :class:`MixedScaler` (mismatch weight ``gamma``, default :data:`MISMATCH`)."""
    if cats is None:
        return Scaler.fit(X, scale)
    g = MISMATCH if gamma is None else float(gamma)
    return MixedScaler(Scaler.fit(X[:, list(cats.numeric)], scale), cats, g)
