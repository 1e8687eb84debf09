"""Pure analytics over graphs held as numpy arrays and igraph graphs.

May import the standard library, numpy, scipy, igraph and numba only: no
database, HTTP or pydantic code. Public names are re-exported here by the
lead once each module lands (a test checks ``__all__`` agrees).
"""
