"""GUI tests. A package, so that its conftest.py does not replace the engine's tests/conftest.py
under the module name "conftest" (engine tests import helpers from it)."""
