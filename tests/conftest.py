"""Test entry point: float64 on the CPU before anything is traced."""

import os

os.environ.setdefault("JAX_PLATFORMS", "cpu")

from deform.runtime import configure_jax  # noqa: E402

configure_jax()
