"""perfcheck: measured against expected, for grid-connected PV systems.

The pipeline reads as stages, one module each:
ingest -> quality -> model -> align -> metrics -> detect -> report / evidence.
"""

__version__ = "0.1.0"
