"""Geometry: per-junction exponents and size ratios, and their naive summaries."""

from __future__ import annotations

from allobranch.geometry.exponent import NO_ROOT_REASONS, junction_geometry, solve_exponent
from allobranch.geometry.summary import NAIVE_NOTE, naive_summary

__all__ = ["NAIVE_NOTE", "NO_ROOT_REASONS", "junction_geometry", "naive_summary", "solve_exponent"]
