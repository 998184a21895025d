"""Run-to-run work: the run record, reading a finished run folder back, verifying a past run, comparing
two runs, a history across runs, and publishing an output folder in one step.

The modules sit between results and report in the flow: they read results and finished run folders and
produce plain frozen types that the report presents. Nothing here renders or re-runs; the orchestration
(``runner``, ``audit``, ``tracking``) calls these pieces.
"""
