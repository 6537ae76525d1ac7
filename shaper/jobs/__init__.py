"""Stage 7, the jobs a user runs: optimise-export-report (:mod:`~shaper.jobs.run`), check,
export, sweep, bench; with the textbook comparison and the plots they write.
"""
