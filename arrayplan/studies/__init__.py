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
* :mod:`~arrayplan.studies.zones` — bright and dark zones: acoustic contrast,
  pressure matching and the plan's channels (:func:`~arrayplan.studies.zones.study_zones`);
  the weights and figures of merit in :mod:`~arrayplan.studies.zone_weights`,
  drive filters in :mod:`~arrayplan.studies.zone_filters`, files in
  :mod:`~arrayplan.studies.zone_files`.
* :mod:`~arrayplan.studies.layout` — which N of the candidate positions to fill
  (:func:`~arrayplan.studies.layout_problem.layout_problem`,
  :func:`~arrayplan.studies.layout.choose_layout`); the capacity bound in
  :mod:`~arrayplan.studies.layout_bound`, files in :mod:`~arrayplan.studies.layout_files`.
* :mod:`~arrayplan.studies.compare` — layouts side by side
  (:func:`~arrayplan.studies.compare.compare_plans`).

Two SNRs, named apart: the capacity study takes the plan's SNR of the
strongest channel with all the power on it (``snr_db``); the layout study and
the comparison take a *reference SNR* (``reference_snr_db``: 1 m from one
speaker in free field, all the drive power on it, the power shared among the
speakers), which does not depend on the layout and so can rank layouts.
"""
