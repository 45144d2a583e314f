"""assignplan: plan a week of single-node jobs on a heterogeneous cluster."""

from assignplan.cache import choose_cache_dir

__version__ = "0.1.0"

choose_cache_dir()
