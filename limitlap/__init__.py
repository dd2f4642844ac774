"""limitlap: how much lap time a driver's own demonstrated grip still allows.

From a logged session: the driven racing line, a g-g-V grip envelope fitted to the
driver's best samples, the ideal speed profile by a quasi-steady-state point-mass solver,
and the comparison with the real lap corner by corner.
"""

__version__ = "0.1.0"

import os as _os

# polars (the log parser) allocates through its own jemalloc, which by default keeps freed
# pages for seconds: on a one-hour 200 Hz log the parser's freed buffers then sit beside
# the arrays made from them, and an analysis peaks at about 6x the file's size instead of
# about 3.5x. Returning freed pages at once costs the reader about a tenth of its time
# (benchmarks/bench_pipeline.py). Read by polars when it loads, so it is set here, before
# any limitlap module imports polars; a value the user set is kept.
_os.environ.setdefault("_RJEM_MALLOC_CONF", "dirty_decay_ms:0,muzzy_decay_ms:0")
