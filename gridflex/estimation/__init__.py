"""Elastic thickness from data: forward-model misfit and admittance/coherence."""
