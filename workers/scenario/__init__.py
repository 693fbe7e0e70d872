"""Synthetic demo scenarios: generated inputs for lacuna jobs (pure numpy/scipy, no I/O).

Modules: ``capillaries`` (capillary networks), ``cells`` (two-population cell layouts),
``vessel_masks`` (masks and images drawn from networks). Nothing is imported here, so that
``python -m workers.scenario`` answers a usage error without loading numpy and scipy.
"""
