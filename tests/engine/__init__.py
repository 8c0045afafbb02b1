"""Unit tests of the engine, one module of workers/engine at a time (DEVELOPERS.md lists each
module's oracle)."""
