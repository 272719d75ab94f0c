"""dualcost: true (Konüs) cost-of-living indices beside the formula price indices."""

__version__ = "0.1.0"
