"""The tool's version (one place; the package's face and every output read it here)."""

__version__ = "0.1.0"
