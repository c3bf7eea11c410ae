"""fitwatch: keep a fitted linear planning model honest, night after night."""

import os

__version__ = "0.1.0"

# One BLAS thread a process. Every matrix here is small (a few predictors, the 48 shock nodes of
# the miss laws), where a multi-threaded BLAS spends more on waking and syncing its threads than
# on the work, and a busy machine makes it far worse: a 48 x 48 by 48 x 282 product took
# 1.4 ms with OpenBLAS's default threads against 62 us with one, on this project's 2-core
# machine under load (see DEVELOPERS.md, "Threads"). Parallel work is done by processes
# (``daemon --workers``). Set before numpy loads; a value the user exported wins.
for _name in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "VECLIB_MAXIMUM_THREADS"):
    os.environ.setdefault(_name, "1")
del _name
