"""The jobs the commands run, as library functions: retrain and export a run's pick
(:mod:`.export_pick`), the search's progress (:mod:`.progress`) and summary
(:mod:`.summary`), the report after a search or an export (:mod:`.report_step`)
and the demo's settings (:mod:`.demo`). Like the commands and the report,
these sit on top of both ``tinyconv`` and ``search``; the commands parse, call
them and print.
"""
