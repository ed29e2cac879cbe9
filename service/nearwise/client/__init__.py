"""A Python client for nearwise: pandas DataFrames (or lists of dicts, or ``{columns, rows}``)
in, results with their predictions as a DataFrame out. Standard library only; pandas is
optional (needed only for :attr:`Result.predictions` and :meth:`Result.frame`).

>>> from nearwise.client import Client, ProblemError
>>> nw = Client("http://127.0.0.1:8080")
>>> result = nw.predict(train_df, "power_kw", query=query_df, method="spline")  # doctest: +SKIP
>>> result.predictions[["wind_ms", "value", "lower", "upper", "flags"]]        # doctest: +SKIP
"""

from nearwise.client.results import Result
from nearwise.client.session import CHUNK_ROWS, Client
from nearwise.client.transport import ProblemError

__all__ = ["CHUNK_ROWS", "Client", "ProblemError", "Result"]
