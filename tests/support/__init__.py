"""Helpers shared by test modules of several folders (importable through pytest's pythonpath)."""
