"""catalog: a catalyst screening results database with ranking reports."""

__version__ = "0.1.0"
