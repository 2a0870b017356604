"""On-disk artefacts: one module per file format, each with ``read_*``/``write_*`` and a ``format`` + ``format_version``.

Every file arrayplan writes for another program (or for a later arrayplan
command) belongs to one module that owns its name, its version and its
schema, so that a format changes in one place.  Here so far:

``plan_folder``
    A plan's folder (``arrayplan plan``): manifest, summary, weights.
``irset`` and ``irset_sofa``
    Impulse-response sets, as a folder of WAV + JSON manifest and as an
    AES69 (SOFA) file through sofar.
``signal_sidecar``
    The JSON beside every test-signal WAV (``arrayplan signal``): format
    ``arrayplan-signal``; read back by ``arrayplan deconvolve``.
``deconvolution_summary``
    ``deconvolution.csv`` of an IR set made from recordings (``arrayplan
    deconvolve``), versioned through the ``summary`` block of that set's
    manifest: format ``arrayplan-deconvolution-summary``.

The layers they stand on: ``fileio`` (atomic writes, whole folders
published by one rename, SHA256SUMS, provenance), ``audiofiles`` (reading
audio with one kind of error) and ``tomlfields`` (typed TOML fields).

Still elsewhere, to move here: the filter set (:mod:`arrayplan.filters.files`),
the verification folder (written by ``arrayplan verify``, read by
:mod:`arrayplan.report.discover`) and the calibration record
(:mod:`arrayplan.hardware.calibration_record`).
"""
