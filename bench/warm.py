"""Imported once by the task forkserver (see ``runner.BASE_PRELOAD``) so every task inherits warm caches.

Provenance (the git revision of the source tree, the machine description) is cached per process;
computing it costs two ``git`` calls (~30 ms), which each forked task would otherwise repeat. The
values describe the code as it was when the sweep's task server started.
"""

from ..backends.provenance import machine, source_revision

source_revision()
machine()
