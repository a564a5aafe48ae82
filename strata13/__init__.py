"""strata13: a local compilation database for carbonate carbon-isotope chemostratigraphy.

The engine lives in :mod:`strata13.compile`, the data model in :mod:`strata13.schemas`
and the command line in :mod:`strata13.cli`. The public library face is
:mod:`strata13.compile.api`.
"""

__version__ = "0.1.0"
