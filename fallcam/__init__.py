"""fallcam: command line, rig files, reports, series and batch (imports both stages)."""

__version__ = "0.1.0"
__all__ = ["__version__"]
