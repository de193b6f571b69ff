"""Inverse solutions: sLORETA computed by sourcelab; eLORETA and dSPM through MNE."""

from .sloreta import SourceOperator, sloreta_kernel, source_power

__all__ = ["SourceOperator", "sloreta_kernel", "source_power"]
