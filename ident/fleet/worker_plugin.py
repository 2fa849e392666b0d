"""A worker plugin of the embedded cluster (imported only where ``distributed`` is installed)."""

from __future__ import annotations

import os
import sys
from typing import Any

from distributed.diagnostics.plugin import WorkerPlugin

__all__ = ["NativeOutputToStderr"]


class NativeOutputToStderr(WorkerPlugin):
    """Point a worker process's standard output at its standard error.

    Compiled numeric libraries report some conditions themselves, on file
    descriptor 1 (LAPACK's argument check, for one). The embedded cluster's workers
    inherit the driver's descriptors, and the driver's standard output carries the
    ``--json`` document, so those lines would corrupt it; on standard error they
    stay visible as diagnostics. The engine sets the plugin up again on every worker
    it (re)starts.
    """

    name = "rigfit-native-output-to-stderr"

    def setup(self, worker: Any) -> None:
        """Redirect file descriptor 1 to 2 in the worker process (called by the engine)."""
        sys.stdout.flush()
        os.dup2(sys.stderr.fileno(), 1)
