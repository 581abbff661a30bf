"""icgen's version (also in pyproject.toml), written into every snapshot."""
__version__ = "0.1.0"
