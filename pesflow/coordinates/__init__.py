"""Scan coordinates: the registry of coordinate kinds and the geometry that measures and
displaces them."""
