"""corridor: batch screening of HV AC interference on metallic infrastructure.

Screening estimates for planning only; they do not replace a study by a
licensed engineer under local codes and the asset owner's procedures.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
