"""Time-dependent response: viscous and relaxing mantle, ice and ocean loads, the elastic
Earth."""

from gridflex.glacial.elastic import elastic_halfspace_response

__all__ = ["elastic_halfspace_response"]
