"""Warm-up of ``oscillator-ed`` for the task server (the backend's ``preload``).

Imported once by the forkserver that starts a sweep's tasks: one small solve loads the compiled kernels
(numba) and fills the caches the backend uses, so every task forked afterwards inherits them instead of
loading them again (measured: the first solve in a fresh process costs about 0.6 CPU s more than the
next). A failure here must not stop the server, so it is swallowed: the tasks then load the kernels
themselves.
"""

import contextlib

with contextlib.suppress(Exception):
    from threadpoolctl import threadpool_limits

    from ..problems.spec import Problem
    from .oscillator_ed import OscillatorEDBackend

    with threadpool_limits(limits=1):
        OscillatorEDBackend().solve(Problem.create(2, 1, 1.0), cutoff=10, ladder=3)
