"""Keep Numba's on-disk kernel cache consistent with the sources.

Numba invalidates a cached function when *its own* source file changes, but not when
a function it calls, defined in another file, changes: the caller's cache then keeps
the old callee compiled in. Whenever a source file that defines kernels changes (an
upgrade, a checkout, an edit), the whole in-tree cache of the package is dropped once,
at import, before any kernel is loaded.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

_PACKAGE = Path(__file__).resolve().parent
_STAMP = _PACKAGE / "__pycache__" / "kernel-sources.sha256"


def sources_digest() -> str:
    """SHA-256 of every ``.py`` file of the package that defines compiled kernels."""
    h = hashlib.sha256()
    for path in sorted(_PACKAGE.rglob("*.py")):
        text = path.read_bytes()
        if b"njit" not in text:
            continue  # editing the command line or the I/O code keeps the kernels
        h.update(path.relative_to(_PACKAGE).as_posix().encode())
        h.update(text)
    return h.hexdigest()


def guard_kernel_cache() -> None:
    """Drop cached kernels compiled from other sources than the current ones."""
    try:
        digest = sources_digest()
        if _STAMP.is_file() and _STAMP.read_text().strip() == digest:
            return
        for pattern in ("*.nbi", "*.nbc"):
            for stale in _PACKAGE.rglob(pattern):
                stale.unlink(missing_ok=True)
        _STAMP.parent.mkdir(exist_ok=True)
        tmp = _STAMP.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(digest + "\n")
        os.replace(tmp, _STAMP)
    except OSError:
        # A read-only installation: Numba then caches elsewhere and nothing here changes.
        pass
