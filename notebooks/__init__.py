"""The scenario notebooks (a package only so that their conftest.py has a name of its own)."""
