"""The code version that goes into every input hash: package version plus source hash."""

from __future__ import annotations

import hashlib
from functools import lru_cache
from pathlib import Path

import runner


@lru_cache(maxsize=1)
def code_sha256() -> str:
    """sha256 over the package's Python sources (sorted relative paths and bytes)."""
    root = Path(runner.__file__).parent
    digest = hashlib.sha256()
    for path in sorted(root.rglob("*.py")):
        digest.update(path.relative_to(root).as_posix().encode("utf-8") + b"\0")
        digest.update(path.read_bytes() + b"\0")
    return digest.hexdigest()


def code_version() -> str:
    """``<package version>+<first 12 hex of the source hash>``."""
    return f"{runner.__version__}+{code_sha256()[:12]}"
