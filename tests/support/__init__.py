"""Helpers shared by several test modules (importable: pytest puts tests/ on sys.path)."""
