"""Harness: what the estimators are measured by (bounds, metrics, ...).

It only reads what the estimators produce and what a scenario holds.
"""

from .bounds import fisher_information, network_bounds, position_error_bound
from .metrics import accuracy_metrics, error_cdf

__all__ = [
    "accuracy_metrics",
    "error_cdf",
    "fisher_information",
    "network_bounds",
    "position_error_bound",
]
