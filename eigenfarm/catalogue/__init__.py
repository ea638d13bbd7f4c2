"""The mode catalogue: a zarr directory of eigenpairs of D = M^-½ H M^-½, readable with ``xarray.open_zarr``.

While a job runs, each finished slice is saved as a part in its work folder (:class:`WorkFolder`), so
an interrupted job resumes; :func:`write_catalogue` merges the parts (deduplicated across slice
boundaries, orthonormal, with participation ratios and a completeness verdict) into the catalogue;
:func:`open_catalogue` reads it back chunk by chunk.  The layout is in :mod:`eigenfarm.catalogue.layout`.
"""

from eigenfarm.catalogue.merge import write_catalogue
from eigenfarm.catalogue.participation import participation_ratio
from eigenfarm.catalogue.parts import Part, WorkFolder, work_path
from eigenfarm.catalogue.reader import Catalogue, open_catalogue

__all__ = ["WorkFolder", "Part", "work_path", "write_catalogue", "open_catalogue", "Catalogue",
           "participation_ratio"]
