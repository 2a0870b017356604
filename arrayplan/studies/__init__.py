"""Design studies: questions a plan alone does not answer.

Each study takes a plan (or a rig and its kernel) and returns arrays with
documented shapes and units; the ``arrayplan study ...`` commands write them
as files and figures.  One module per study.
"""
