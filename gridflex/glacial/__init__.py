"""Time-dependent response: viscous and relaxing mantle, ice and ocean loads."""
