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


def check_max_sigma(value) -> float:
    """``max_sigma`` as a float; a one-line ``ValueError`` naming the fix unless it is a
    positive number."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = float("nan")
    if isinstance(value, bool) or not v > 0:
        raise ValueError(f"max_sigma must be a positive number of px, got {value!r}; e.g. "
                         f"{DEFAULT_MAX_SIGMA:g} (the default) or 0.2 to leave uncertain "
                         f"points unmeasured")
    return v
