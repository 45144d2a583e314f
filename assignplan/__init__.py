"""assignplan: plan a week of single-node jobs on a heterogeneous cluster."""

__version__ = "0.1.0"
