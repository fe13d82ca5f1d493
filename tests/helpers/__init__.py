"""Helpers shared by several test modules (importable as ``helpers.*`` because tests/conftest.py puts
tests/ on ``sys.path``).  Test modules import from here, never from one another."""
