"""Where the compiled kernels are cached when the package's own folder is read-only.

numba caches compiled code beside the source (`__pycache__`), else in the user's cache folder
(~/.cache); installed for another user or in a system site-packages, with no writable home,
both fail and even `--help` would end in a traceback. `ASSIGNPLAN_CACHE_DIR` moves the cache
anywhere; otherwise, when the package folder is not writable, the first writable of
$XDG_CACHE_HOME/assignplan, ~/.cache/assignplan and <temp>/assignplan-<user id> is used.
Must run before numba is imported (numba reads its settings once, at import).
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

ENV = "ASSIGNPLAN_CACHE_DIR"
_NUMBA_ENV = "NUMBA_CACHE_DIR"


def _writable(folder: Path) -> bool:
    """True when a file can really be created in `folder` (made if missing)."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, probe = tempfile.mkstemp(dir=folder)
    except OSError:
        return False
    os.close(fd)
    os.unlink(probe)
    return True


def candidates() -> list[Path]:
    """Per-user cache folders, most preferred first."""
    out = []
    xdg = os.environ.get("XDG_CACHE_HOME")
    if xdg:
        out.append(Path(xdg) / "assignplan")
    home = os.environ.get("HOME")
    if home:
        out.append(Path(home) / ".cache" / "assignplan")
    uid = os.getuid() if hasattr(os, "getuid") else "user"
    out.append(Path(tempfile.gettempdir()) / f"assignplan-{uid}")
    return out


def choose_cache_dir() -> None:
    """Set numba's cache folder from ASSIGNPLAN_CACHE_DIR, or to a per-user folder when the
    package folder is read-only; leave numba's own choice (beside the source) otherwise."""
    if os.environ.get(ENV):
        os.environ[_NUMBA_ENV] = os.environ[ENV]
        return
    if os.environ.get(_NUMBA_ENV) or _writable(Path(__file__).parent / "__pycache__"):
        return
    for folder in candidates():
        if _writable(folder):
            os.environ[_NUMBA_ENV] = str(folder)
            return
