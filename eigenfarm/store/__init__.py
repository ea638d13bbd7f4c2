"""The Hessian store: a zarr directory of block-sparse rows split into atom shards.

Write one from a configuration and a potential (:func:`build_store`) or from a Matrix Market file
(:func:`import_matrix_market`); open it with :func:`open_store` to read shards, stream products H·x
and print a summary.  The layout is documented in docs/store-format.md.
"""

from eigenfarm.store.importer import import_matrix_market
from eigenfarm.store.reader import HessianStore, open_store
from eigenfarm.store.validate import validate_store
from eigenfarm.store.writer import build_store

__all__ = ["build_store", "import_matrix_market", "open_store", "HessianStore", "validate_store"]
