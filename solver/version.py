"""Program version, recorded in every file the tool writes."""
__version__ = "0.1.0"
