"""Programs kept on disk, so a later process neither traces nor compiles them again.

JAX's persistent compilation cache skips XLA compilation, but every process still traces and
lowers the Python function, which for a search step takes seconds (and about half a second for
the cold orbit search). :func:`persistent_jit` exports the jitted function once (``jax.export``:
StableHLO, platform-independent) under a key of (identity, argument types, the source of
``deform``/``objectives``, the JAX version) and later processes reload it; its XLA executable
then comes from the persistent cache. First and later runs call the same exported program, so
their results agree bit for bit. Programs live in ``<directory>/programs``, by default beside
JAX's compilation cache (no cache configured: plain ``jax.jit``).
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import os
import tempfile
from pathlib import Path
from typing import Any, Callable

import jax

PACKAGES = ("deform", "objectives")
SUFFIX = ".stablehlo"
KEPT_PROGRAMS = 64
"""Programs kept per cache directory; the least recently used beyond this are deleted (a sweep
over many configs would otherwise fill the disk, ~0.3–1 MB each)."""


@functools.lru_cache(maxsize=1)
def source_digest() -> str:
    """SHA-256 of every module of the packages a step program is traced from."""
    root = Path(__file__).resolve().parents[1]
    digest = hashlib.sha256()
    for package in PACKAGES:
        for path in sorted((root / package).rglob("*.py")):
            digest.update(str(path.relative_to(root)).encode())
            digest.update(path.read_bytes())
    return digest.hexdigest()


def program_key(identity: str, leaves) -> str:
    """Key of a program: what it computes (identity), its argument types and the code/JAX
    versions that traced it."""
    import jaxlib

    digest = hashlib.sha256()
    for part in (identity, source_digest(), jax.__version__, jaxlib.__version__,
                 str(jax.config.jax_enable_x64)):
        digest.update(part.encode())
        digest.update(b"\0")
    for leaf in leaves:
        aval = jax.typeof(leaf)
        digest.update(f"{aval.shape}{aval.dtype}{aval.weak_type};".encode())
    return digest.hexdigest()[:32]


def persistent_jit(fn: Callable, example_args: tuple, out_tree, identity: str,
                   directory: Path | None = None) -> Callable:
    """``jax.jit(fn)`` for arguments shaped like ``example_args``, reusing an exported program.

    ``out_tree`` is the treedef of ``fn``'s output; ``identity`` must determine the trace (for a
    search, the config text and the parsed specs). A program that cannot be exported (or a cache
    directory that cannot be written) falls back to plain ``jax.jit``; a damaged file is
    replaced.
    """
    from jax import export

    if directory is None:
        if not jax.config.jax_compilation_cache_dir:
            return jax.jit(fn)
        directory = Path(jax.config.jax_compilation_cache_dir)
    leaves, in_tree = jax.tree_util.tree_flatten(example_args)
    folder = Path(directory) / "programs"
    path = folder / (program_key(identity + str(in_tree) + str(out_tree), leaves) + SUFFIX)

    def flat(*flat_args):
        return jax.tree_util.tree_leaves(fn(*jax.tree_util.tree_unflatten(in_tree, flat_args)))

    exported = _load(path, out_tree.num_leaves)
    if exported is None:
        try:
            exported = export.export(jax.jit(flat))(*leaves)
        except Exception:  # noqa: BLE001 — an unexportable op only costs the disk cache
            return jax.jit(fn)
        _store(path, exported.serialize())
    call = jax.jit(exported.call)

    def compiled(*args: Any):
        return jax.tree_util.tree_unflatten(out_tree, call(*jax.tree_util.tree_leaves(args)))

    return compiled


def boundary_identity(fn: Callable) -> str | None:
    """A text that determines a curve's boundary function across processes, or None.

    Only bound methods of the frozen-dataclass families defined in ``deform``/``objectives``
    qualify: their repr lists every field and their code is in :func:`source_digest`. Anything
    else (a function or a family defined elsewhere) may change without the key noticing."""
    owner = getattr(fn, "__self__", None)
    if owner is None or not dataclasses.is_dataclass(owner) or not getattr(
            type(owner), "__dataclass_params__").frozen:
        return None
    if type(owner).__module__.split(".")[0] not in PACKAGES:
        return None
    text = f"{type(owner).__module__}.{type(owner).__qualname__}.{fn.__name__}:{owner!r}"
    return None if " at 0x" in text else text


def _load(path: Path, n_out: int):
    from jax import export

    try:
        exported = export.deserialize(bytearray(path.read_bytes()))
    except FileNotFoundError:
        return None
    except Exception:  # noqa: BLE001 — a damaged or foreign file: trace again, overwrite it
        return None
    try:
        os.utime(path)  # recently used: kept by _evict
    except OSError:
        pass
    return exported if len(exported.out_avals) == n_out else None


def _store(path: Path, data: bytes) -> None:
    """Atomic write (a killed run leaves no half file); unwritable caches are skipped."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with tempfile.NamedTemporaryFile(dir=path.parent, delete=False) as tmp:
            tmp.write(data)
        os.replace(tmp.name, path)
        _evict(path.parent)
    except OSError:
        pass


def _evict(folder: Path, keep: int = KEPT_PROGRAMS) -> None:
    kept = sorted(folder.glob("*" + SUFFIX), key=lambda p: p.stat().st_mtime, reverse=True)
    for old in kept[keep:]:
        old.unlink(missing_ok=True)
