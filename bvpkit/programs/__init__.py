"""Code generated from plain-data programs: exact Jacobians, the compiled system, the disk cache."""
