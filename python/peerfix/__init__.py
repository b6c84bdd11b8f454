"""peerfix: cooperative positioning for ranging radio tags.

A fixed-point belief-propagation core for the tag, and the host tools that
check it: a float64 twin of the method, a network simulator, scenario files,
bounds, metrics and reports.
"""

__version__ = "0.1.0"
