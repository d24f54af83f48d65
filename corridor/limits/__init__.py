"""corridor.limits package."""
