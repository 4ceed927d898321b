"""Scores of segmentations against human ground truth.

- :mod:`imgcut.metrics.region`: Segmentation Covering, (Probabilistic) Rand Index,
  Variation of Information (with false splits / false merges).
- :mod:`imgcut.metrics.boundary`: boundary precision, recall and F with a distance tolerance.
- :mod:`imgcut.metrics.aggregate`: ODS, OIS and covering Best over a parameter sweep.
- :mod:`imgcut.metrics.instance`: object matching at IoU thresholds, splits and merges.

Conventions: label images are 2-D non-negative integers; ground-truth label 0 is an
unlabelled pixel (ignored by the region measures), segmentation label 0 is "no region"
(see each module). Docs with the definitions and the human-agreement check on BSDS500:
``docs/metrics.md``.
"""

from imgcut.metrics.aggregate import (
    BoundarySummary,
    RegionSummary,
    summarize_boundaries,
    summarize_regions,
)
from imgcut.metrics.boundary import (
    DEFAULT_MAX_DIST,
    BoundaryCounts,
    boundary_counts,
    boundary_scores,
    boundary_sweep,
    f_measure,
    label_boundaries,
    match_boundaries,
)
from imgcut.metrics.instance import InstanceScores, instance_scores
from imgcut.metrics.region import (
    RegionScores,
    VariationOfInformation,
    probabilistic_rand_index,
    rand_index,
    region_scores,
    segmentation_covering,
    variation_of_information,
)

__all__ = [
    "DEFAULT_MAX_DIST",
    "BoundaryCounts",
    "BoundarySummary",
    "InstanceScores",
    "RegionScores",
    "RegionSummary",
    "VariationOfInformation",
    "boundary_counts",
    "boundary_scores",
    "boundary_sweep",
    "f_measure",
    "instance_scores",
    "label_boundaries",
    "match_boundaries",
    "probabilistic_rand_index",
    "rand_index",
    "region_scores",
    "segmentation_covering",
    "summarize_boundaries",
    "summarize_regions",
    "variation_of_information",
]
