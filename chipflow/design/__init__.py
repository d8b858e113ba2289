"""Sizing: per-generation width, depth and count from branching rules and targets."""

from chipflow.design.model import ROLES, Level, TreeDesign

__all__ = ["ROLES", "Level", "TreeDesign"]
