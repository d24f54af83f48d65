"""corridor.network package."""
