"""The registry of methods, by name."""

from nearwise.core.methods.additive import Additive
from nearwise.core.methods.base import Method
from nearwise.core.methods.knn import KNN
from nearwise.core.methods.linear import Linear
from nearwise.core.methods.spline import Spline

METHODS: dict[str, Method] = {m.name: m for m in (KNN(), Linear(), Spline(), Additive())}

__all__ = ["METHODS", "Method"]
