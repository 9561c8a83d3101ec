"""The tool's version: one place, imported by the package and by the manifest it writes."""

__version__ = "0.1.0"
