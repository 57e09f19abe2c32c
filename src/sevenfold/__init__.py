"""sevenfold: steady -div(k grad u) = f on 3D box grids, from job file to chunked zarr."""

__version__ = "0.1.0"
