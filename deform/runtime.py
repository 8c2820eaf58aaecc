"""Process-wide JAX settings, applied at entry points only (CLI, tests), never on import."""

from __future__ import annotations

import os
from pathlib import Path


def cache_dir() -> Path:
    root = os.environ.get("DEFORM_CACHE") or os.path.join(
        os.environ.get("XDG_CACHE_HOME", os.path.expanduser("~/.cache")), "isodrum", "jax")
    return Path(root)


def configure_jax(compilation_cache: bool = True) -> None:
    """float64 on the CPU; the persistent compilation cache so a second run does not recompile."""
    os.environ.setdefault("JAX_PLATFORMS", "cpu")
    import jax

    jax.config.update("jax_enable_x64", True)
    jax.config.update("jax_platforms", "cpu")
    if compilation_cache:
        path = cache_dir()
        try:
            path.mkdir(parents=True, exist_ok=True)
        except OSError:
            return
        jax.config.update("jax_compilation_cache_dir", str(path))
        jax.config.update("jax_persistent_cache_min_compile_time_secs", 0.0)
        jax.config.update("jax_persistent_cache_min_entry_size_bytes", 0)
