"""JIT options shared by every kernel.

error_model="numpy" lets a division by zero give inf/nan instead of raising, which lets
LLVM vectorise the arithmetic; fastmath stays off so results are IEEE-exact and the same
whatever the number of threads. nogil: kernels called from several Python threads (the
spectra of several points at once) run side by side.
"""

from __future__ import annotations

import numba

JIT_OPTIONS = {"error_model": "numpy", "fastmath": False, "cache": True, "nogil": True}


def jit(function=None, *, parallel: bool = False, inline: bool = False):
    """numba.njit with the project's options; inline: compiled into each caller (numba IR)."""
    decorator = numba.njit(parallel=parallel, inline="always" if inline else "never",
                           **JIT_OPTIONS)
    return decorator if function is None else decorator(function)
