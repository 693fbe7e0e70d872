"""Synthetic demo scenarios: generated inputs for lacuna jobs.

Generators (pure numpy/scipy, no I/O): ``capillaries`` (capillary networks), ``cells``
(two-population cell layouts), ``vessel_masks`` (masks and images drawn from networks).
``writers`` writes them as demo files, ``picture`` draws the README's picture. Nothing is
imported here, so that ``python -m workers.scenario`` answers a usage error without loading
numpy and scipy.
"""
