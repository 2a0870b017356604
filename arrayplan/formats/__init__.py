"""On-disk artefacts: one module per file format, each with ``read_*``/``write_*`` and a ``format`` + ``format_version``.

Every file arrayplan writes for another program (or for a later arrayplan
command) belongs to one module that owns its name, its version and its
schema, so that a format changes in one place.  Here so far:

``signal_sidecar``
    The JSON beside every test-signal WAV (``arrayplan signal``): format
    ``arrayplan-signal``; read back by ``arrayplan deconvolve``.
``deconvolution_summary``
    ``deconvolution.csv`` of an IR set made from recordings (``arrayplan
    deconvolve``), versioned through the ``summary`` block of that set's
    manifest: format ``arrayplan-deconvolution-summary``.

Still elsewhere, to move here: the plan folder (:mod:`arrayplan.plan_files`),
the filter set (:mod:`arrayplan.filters.files`), the IR set
(:mod:`arrayplan.irset`) and its AES69 (SOFA) form
(:mod:`arrayplan.irset_sofa`), the verification folder (written by
``arrayplan verify``, read by :mod:`arrayplan.report.discover`) and the
calibration record (:mod:`arrayplan.hardware.calibration`).
"""
