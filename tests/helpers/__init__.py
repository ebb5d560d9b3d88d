"""Helpers shared by the tests: synthetic grids and maps, the fuzz corpus, the JupyterLab browser harness.

``pythonpath = ["tests"]`` in pyproject.toml lets every test import them as ``from helpers.burst_grids import ...``.
"""
