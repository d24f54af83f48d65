"""corridor.geometry package."""
