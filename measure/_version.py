"""The tool version, written into every sidecar."""

__version__ = "0.1.0"
