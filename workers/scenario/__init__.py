"""Synthetic demo scenarios: generated inputs for lacuna jobs (pure numpy/scipy, no I/O)."""

from workers.scenario.capillaries import CapillaryNetwork, capillary_network, capillary_request

__all__ = ["CapillaryNetwork", "capillary_network", "capillary_request"]
