"""The version of kindyn (the same as in pyproject.toml), at the bottom layer so that any module may
name it without importing the package's top (``kindyn/__init__.py``)."""

__version__ = "0.1.0"
