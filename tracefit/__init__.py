"""tracefit: identify the slip or twin system behind straight bands in micrographs.

The library is a set of small modules (geometry, image, matching, reports) with a
thin command line on top (:mod:`tracefit.cli`). Conventions are fixed once in
``docs/conventions.md`` and in :mod:`tracefit.conventions`.
"""

__version__ = "0.1.0"

CAUTION = (
    "tracefit supports, and never replaces, qualified investigation. Where a result "
    "feeds a failure analysis of a part in service, defer to local codes, standards "
    "and licensed engineering practice."
)
