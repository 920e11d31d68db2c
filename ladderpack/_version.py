"""Tool version, recorded in every generated file and sidecar."""

__version__ = "0.1.0"
