"""Which allocator Arrow uses in a harmonize process.

pyarrow's wheels allocate through mimalloc by default where they have it. A build allocates and
frees many column buffers of a few megabytes for every batch, and with mimalloc the kernel spent
about twice the time on it: at 5 million benchmark rows (INVENTED data, benchmarks/), six
alternating builds with each allocator took 11.8-14.7 s (mean 13.2 s) with mimalloc and
10.3-12.3 s (mean 11.3 s) with jemalloc, with system CPU 3.4-4.1 s against 1.5-1.8 s and a
peak of 857-898 MiB against 769-795 MiB. So the command line chooses jemalloc where pyarrow
has it (Linux and macOS wheels), unless the user chose a pool with Arrow's own environment
variable ARROW_DEFAULT_MEMORY_POOL. The library leaves the process's pool alone.
"""

from __future__ import annotations

import os

import pyarrow as pa

POOL_VARIABLE = "ARROW_DEFAULT_MEMORY_POOL"


def choose_memory_pool() -> str:
    """Use jemalloc for Arrow's allocations if available and no pool was chosen; the name of
    the pool in use."""
    if not os.environ.get(POOL_VARIABLE) and "jemalloc" in pa.supported_memory_backends():
        pa.set_memory_pool(pa.jemalloc_memory_pool())
    return pa.default_memory_pool().backend_name
