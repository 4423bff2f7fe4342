"""geoops: the rutwise engine.

Pure computation plus file I/O: reads rut layers, builds a local metric frame, cleans ruts,
pairs them, infers travel direction and wheelbase, and writes the output contract. It never
imports a web framework; the HTTP service and the CLI are thin adapters over it.
"""

__version__ = "0.1.0"
