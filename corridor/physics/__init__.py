"""Physics core: pure, vectorised functions. Arrays in, arrays out.

No GIS types are imported here; every argument carries its unit in its name.
"""
