"""Files larger than memory: a dataset read and fitted in chunks with bounded memory.

``reader`` streams the CSV (the whole-file reader's rules), ``design`` builds each chunk's design, ``qr``
updates the triangular factor and refines the estimates, ``fit`` runs the two passes and makes the report.
The one entry point is :func:`sitegen.stream.fit.fit_in_chunks`, called from :mod:`sitegen.analyze` for a
file at or above ``[limits] stream_above_megabytes`` (or the sidecar's).
"""
