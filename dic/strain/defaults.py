"""The strain settings every part of the package uses unless told otherwise."""

from dic.limits import GROW_SIGMA

#: points per side of the square window of the pointwise least-squares strain fit
DEFAULT_WINDOW = 9
#: strain measure: the finite (Green-Lagrange) strain, exact at any strain
DEFAULT_MEASURE = "green-lagrange"
#: a measured point whose larger standard deviation (std_u, std_v) exceeds this (px) weighs
#: (FULL_WEIGHT_SIGMA / sigma)^2 in the strain fit (inverse-variance weighting against the
#: well-determined points): the limit through which the matching grows from point to point
#: (dic.limits.GROW_SIGMA), beyond which points are measured but uncertain
FULL_WEIGHT_SIGMA = GROW_SIGMA
