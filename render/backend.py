"""Choose and initialise the Mitsuba 3 variant for this process.

The LLVM backend (``llvm_ad_rgb``) needs libLLVM 17 or newer; older
libLLVM builds crash Dr.Jit. When none is found we fall back to the
``scalar_rgb`` variant, which needs nothing but is about 3x slower.

No Django import here: workers, tests and the CLI all use this module.
Import Mitsuba only through :func:`init_renderer`, inside the process
that renders (after a worker forks), never at module import time.
"""

from __future__ import annotations

import glob
import logging
import os
import re
from dataclasses import dataclass

log = logging.getLogger("evenframe.render")

MIN_LLVM_MAJOR = 17
LLVM_VARIANT = "llvm_ad_rgb"
SCALAR_VARIANT = "scalar_rgb"

_SEARCH_DIRS = (
    "/usr/lib/x86_64-linux-gnu",
    "/usr/lib/aarch64-linux-gnu",
    "/usr/lib64",
    "/usr/lib",
    "/usr/local/lib",
    "/opt/homebrew/opt/llvm/lib",
    "/usr/local/opt/llvm/lib",
)


@dataclass(frozen=True)
class BackendChoice:
    variant: str
    libllvm_path: str | None
    reason: str


def _llvm_major(path: str) -> int | None:
    """Major version of a libLLVM file from its name (libLLVM-19.so, libLLVM.so.19.1)."""
    name = os.path.basename(path)
    match = re.match(r"libLLVM(?:-(\d+))?(?:\.\d+)*\.(?:so|dylib)(?:\.(\d+))?", name)
    if not match:
        return None
    major = match.group(1) or match.group(2)
    return int(major) if major else None


def find_libllvm(search_dirs: tuple[str, ...] = _SEARCH_DIRS) -> tuple[str | None, str]:
    """Return (path, reason) of the newest usable libLLVM, or (None, reason)."""
    env_path = os.environ.get("DRJIT_LIBLLVM_PATH")
    if env_path:
        if not os.path.exists(env_path):
            return None, f"DRJIT_LIBLLVM_PATH={env_path} does not exist"
        major = _llvm_major(env_path)
        if major is not None and major < MIN_LLVM_MAJOR:
            return None, f"DRJIT_LIBLLVM_PATH={env_path} is libLLVM {major} (< {MIN_LLVM_MAJOR})"
        return env_path, f"DRJIT_LIBLLVM_PATH={env_path}"
    candidates: list[tuple[int, str]] = []
    for directory in search_dirs:
        for path in glob.glob(os.path.join(directory, "libLLVM*")):
            major = _llvm_major(path)
            if major is not None:
                candidates.append((major, path))
    if not candidates:
        return None, "no libLLVM found in " + ", ".join(search_dirs)
    usable = sorted((c for c in candidates if c[0] >= MIN_LLVM_MAJOR), reverse=True)
    if not usable:
        found = ", ".join(sorted({str(m) for m, _ in candidates}))
        return None, f"only libLLVM {found} found (need >= {MIN_LLVM_MAJOR})"
    major, path = usable[0]
    return path, f"found libLLVM {major} at {path}"


def choose_backend(preferred: str | None = None) -> BackendChoice:
    """Pick the variant without importing Mitsuba.

    ``preferred`` (or the environment variable ``EVENFRAME_RENDER_VARIANT``)
    may force ``scalar_rgb`` or ``llvm_ad_rgb``.
    """
    preferred = preferred or os.environ.get("EVENFRAME_RENDER_VARIANT") or None
    if preferred == SCALAR_VARIANT:
        return BackendChoice(SCALAR_VARIANT, None, "scalar_rgb requested")
    path, reason = find_libllvm()
    if path is None:
        if preferred == LLVM_VARIANT:
            raise RuntimeError(f"llvm_ad_rgb requested but unusable: {reason}")
        return BackendChoice(SCALAR_VARIANT, None, reason + "; falling back to scalar_rgb")
    return BackendChoice(LLVM_VARIANT, path, reason)


_initialised: BackendChoice | None = None


def init_renderer(*, variant: str | None = None, threads: int | None = None) -> BackendChoice:
    """Import Mitsuba, select the variant and the thread count; log one line.

    Idempotent within a process. ``threads`` (or ``EVENFRAME_RENDER_THREADS``)
    bounds Dr.Jit's thread pool so that several workers on one machine do
    not oversubscribe its cores.
    """
    global _initialised
    if _initialised is not None and (variant is None or variant == _initialised.variant):
        return _initialised
    choice = choose_backend(variant)
    if choice.libllvm_path:
        os.environ["DRJIT_LIBLLVM_PATH"] = choice.libllvm_path
    import drjit as dr
    import mitsuba as mi

    mi.set_variant(choice.variant)
    threads = threads or int(os.environ.get("EVENFRAME_RENDER_THREADS", "0") or 0)
    if threads > 0:
        dr.set_thread_count(threads)
    log.info("renderer variant %s (%s)", choice.variant, choice.reason)
    _initialised = choice
    return choice


def available_variants() -> list[str]:
    """Variants this machine can actually run (scalar always; llvm if libLLVM >= 17)."""
    variants = [SCALAR_VARIANT]
    if find_libllvm()[0] is not None:
        variants.append(LLVM_VARIANT)
    return variants
