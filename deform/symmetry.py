"""Symmetry classes of planar domains, enforced by which Fourier modes a family may use.

Axes are fixed: the centre is the origin and the mirror line is the x-axis.
``central`` is x ↦ −x, ``rotational`` is Z_n (rotation by 2π/n), ``dihedral`` is D_n
(Z_n plus the mirror). A parameter vector of a class can only produce curves of that class.
"""

from __future__ import annotations

from dataclasses import dataclass

KINDS = ("none", "central", "mirror", "rotational", "dihedral")


@dataclass(frozen=True)
class Symmetry:
    kind: str = "none"
    order: int = 1

    def __post_init__(self):
        if self.kind not in KINDS:
            raise ValueError(f"symmetry must be one of {', '.join(KINDS)}")
        if self.kind in ("rotational", "dihedral") and self.order < 2:
            raise ValueError("symmetry order must be an integer >= 2 for rotational/dihedral")

    @property
    def rotation_order(self) -> int:
        """n such that rotation by 2π/n is a symmetry (1 if none)."""
        if self.kind == "central":
            return 2
        if self.kind in ("rotational", "dihedral"):
            return self.order
        return 1

    @property
    def mirrored(self) -> bool:
        return self.kind in ("mirror", "dihedral")

    def radial_mode_allowed(self, k: int, sine: bool) -> bool:
        """For r(θ) or h(φ) = Σ c_k cos kθ + s_k sin kθ: may this term be nonzero?"""
        if sine and self.mirrored:
            return False
        return k % self.rotation_order == 0

    def complex_mode_allowed(self, k: int, imaginary: bool) -> bool:
        """For z(t) = Σ ĉ_k e^{ikt}: may Re/Im ĉ_k be nonzero? (Z_n ⇔ k ≡ 1 mod n; mirror ⇔ ĉ_k real)."""
        if imaginary and self.mirrored:
            return False
        return (k - 1) % self.rotation_order == 0

    def describe(self) -> str:
        if self.kind in ("rotational", "dihedral"):
            return f"{self.kind} (order {self.order})"
        return self.kind
