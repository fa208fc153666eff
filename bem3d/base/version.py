"""The version of bem3d: the one place it is written."""

__version__ = "0.1.0"
