"""The package version, in its own module so that every layer can name it without importing
the package's public interface (``allocator/__init__.py``)."""

__version__ = "0.1.0"
