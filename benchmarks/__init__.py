"""Side-by-side benchmarks: ``python -m benchmarks`` (see DEVELOPERS.md)."""
