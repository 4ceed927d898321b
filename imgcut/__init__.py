"""imgcut: image segmentation by normalized cuts.

>>> import numpy as np, imgcut
>>> image = np.zeros((24, 32)); image[:, 16:] = 1.0
>>> int(imgcut.segment(image, n_regions=2).labels.max())
2
"""

from imgcut.objects import ObjectSegmentation, segment_objects
from imgcut.segment import Segmentation, segment

__version__ = "0.1.0"

__all__ = [
    "segment",
    "Segmentation",
    "segment_objects",
    "ObjectSegmentation",
    "__version__",
]
