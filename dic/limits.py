"""How sure a measured point must be: limits that the matching, the sequence analysis, the
strain fit and the report share (kept here, light to import, so that none of them needs
another's compiled parts to know them)."""

#: default of dic.correlate's and dic.track's ``max_sigma`` (px): points whose standard
#: deviation of u or v from the fit exceeds it are not measured (``Reason.FLAT``)
DEFAULT_MAX_SIGMA = 2.0
#: the propagation grows only through matches at least this sure (px; or max_sigma if smaller);
#: the less certain points are matched afterwards from well-determined neighbours
#: (dic.matching), and weigh (GROW_SIGMA / sigma)^2 in the strain fit (dic.strain)
GROW_SIGMA = 0.2
