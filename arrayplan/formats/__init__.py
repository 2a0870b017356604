"""On-disk artefacts: one module per file format, each with ``read_*``/``write_*`` and a ``format`` + ``format_version``.

Every file arrayplan writes for another program (or for a later arrayplan
command) belongs to one module that owns its name, its version and its
schema, so that a format changes in one place.  Each names and versions its
files the same way, through ``_versioning`` (``stamp`` and ``check``):
readers refuse another ``format`` and a newer ``format_version``, and read
the previous release's files (marked with ``kind``, or unmarked) for one
release.

``plan_folder``
    A plan's folder (``arrayplan plan``): ``weights.json`` (format
    ``arrayplan-plan``), ``weights.npz``, and the tables of ``plan_tables``
    (channels, summary, long weights); ``plan_provenance`` records the IR
    set or rig file a plan came from.
``filter_set``
    FIR filters for a DSP (``arrayplan filters``): WAV taps per channel,
    ``filters.json`` (format ``arrayplan-filter-set``), weights table,
    ``filters-matrix.txt``, the check; read back by ``arrayplan verify``
    and the channel probe.
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
``verification_folder``
    ``arrayplan verify``'s folder: ``verify.json`` (format
    ``arrayplan-verification``), two tables, the arrays, figures; read back
    by the report.
``calibration_record``
    Microphone sensitivities, output gains and latency as TOML (format
    ``arrayplan-calibration``), written by ``arrayplan calibrate``.
``study_sidecars``
    The names and versions of the design-study sidecars (capacity,
    tolerance, zones, layout, comparison) and their reader; the study
    folders' writers stay in :mod:`arrayplan.studies`, beside the figures
    they draw.

The layers they stand on: ``_versioning`` (naming and versioning),
``hidden_names`` (hidden staging and set-aside names, cleanup of those
killed runs left), ``atomic_files`` (atomic single-file writes),
``output_folders`` (whole folders published by one rename, SHA256SUMS,
refusal of foreign files), ``fileio`` (the provenance header; every writer
importable from it too), ``audiofiles`` (reading audio with one kind of
error) and ``tomlfields`` (typed TOML fields).
"""
