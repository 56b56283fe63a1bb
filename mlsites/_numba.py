"""The one shared numba decorator.

``ngjit`` compiles in nopython mode with caching; ``pjit`` also enables
``prange`` parallel loops. Kernels import these and nothing else from numba so the
compile options live in one place.
"""

import numba

ngjit = numba.njit(cache=True, nogil=True)
pjit = numba.njit(cache=True, nogil=True, parallel=True)
prange = numba.prange

__all__ = ["ngjit", "pjit", "prange"]
