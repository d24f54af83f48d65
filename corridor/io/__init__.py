"""corridor.io package."""
