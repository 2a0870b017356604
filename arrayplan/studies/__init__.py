"""Design studies: questions a plan alone does not answer.

Each study takes a plan (or a rig and its kernel) and returns arrays with
documented shapes and units; the ``arrayplan study ...`` commands write them
as files and figures.  One module per study.

* :mod:`~arrayplan.studies.capacity` — water-filling capacity against SNR
  (:func:`~arrayplan.studies.capacity.capacity_study`).
* :mod:`~arrayplan.studies.tolerance` — Monte Carlo of placement, gain and
  phase errors on the planned weights, with the first-order prediction
  (:func:`~arrayplan.studies.tolerance.tolerance_study`); its trials, in
  chunks, in :mod:`~arrayplan.studies.trials`.
* :mod:`~arrayplan.studies.files` — their folders, read back, and verdicts.
"""
