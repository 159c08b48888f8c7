"""The software versions every record carries: one place builds them, for the record and the explain room."""

from __future__ import annotations

import platform

from casefile import __version__


def software_versions(extra: dict[str, str] | None = None) -> dict[str, str]:
    """casefile, Python, torch, numpy and scipy versions, and torch's intra-op thread count, as strings.

    The thread count is kept because float sums on a CPU can differ in the last bits with the number of
    threads, so a map recomputed later is compared under the same setting. ``extra`` adds or replaces
    entries.
    """
    import numpy as np
    import scipy
    import torch

    versions = {"casefile": __version__, "python": platform.python_version(), "torch": torch.__version__,
                "numpy": np.__version__, "scipy": scipy.__version__, "torch_threads": str(torch.get_num_threads())}
    versions.update({k: str(v) for k, v in (extra or {}).items()})
    return versions
