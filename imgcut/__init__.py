"""imgcut: image segmentation by normalized cuts."""

__version__ = "0.1.0"
