"""Errors that reach the user as one line (never a traceback)."""


class DeformError(Exception):
    """Base class: the message is complete and printed as ``deform: error: <message>``."""


class ConfigError(DeformError):
    """A config key or command-line argument is missing, unknown, mistyped or out of range."""


class ShapeError(DeformError):
    """A shape is not an admissible domain (not simple, non-positive radius, not convex…)."""
