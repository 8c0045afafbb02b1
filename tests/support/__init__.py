"""Builders that the tests and the benchmarks share: lumped circuits, frequency grids, engine and
JSON requests, packed payloads, the queue's process harness, and live-API helpers.

Test modules (``test_*.py``) import from here and never from each other; the benchmarks import
only from here (``tests/test_support_layout.py`` checks both).
"""
