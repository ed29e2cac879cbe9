"""nearwise: smoothing and prediction with cross-validated tuning, served over HTTP."""

__version__ = "0.1.0"
