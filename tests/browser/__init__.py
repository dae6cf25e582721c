"""Browser layer (a package, so its conftest and modules never shadow tests/conftest.py)."""
