"""The strain settings every part of the package uses unless told otherwise."""

#: points per side of the square window of the pointwise least-squares strain fit
DEFAULT_WINDOW = 9
#: strain measure: the finite (Green-Lagrange) strain, exact at any strain
DEFAULT_MEASURE = "green-lagrange"
