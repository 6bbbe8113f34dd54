"""Geometry stage: straight conductors cut into segments, the metal as a circuit, the plan view."""
