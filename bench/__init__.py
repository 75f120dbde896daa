"""The benchmark harness and the ``trapbench`` command line.

Python API (every piece also has a command: ``trapbench sweep | check | export | advise``):

- ``suite.load_suite(name_or_path) -> Suite``: problems x backends x parameter ladders, tolerances;
- ``executor.execute(backend, problem, params, isolated=False, limits=None) -> Outcome``: one backend
  on one problem, in this process or in an isolated child (``runner``), with one error handling;
- ``sweep.run_sweep(suite, SweepOptions(...)) -> SweepReport``: runs the tasks whose stored outcome
  does not stand, each through the executor, isolated, serially or on Dask (``distributed``);
- ``store.Store.open(path)``: the SQLite results store; ``tasks_frame()``, ``results_frame()``,
  ``result(task_key)``, ``export(path)``;
- ``tables``: agreement, accuracy-vs-cost, cost-vs-N and calibration tables from a results frame,
  Markdown / CSV / HTML output with figures of error against CPU time and memory;
- ``verdicts``: when a result counts as reaching an accuracy (``judge``, ``judge_frame``) and how
  well error bars cover the truth (``error_bar_calibration``);
- ``report.write_report(store, folder)``: the Markdown/HTML report (``trapbench report``);
- ``gate``: compare with a baseline (``pytest_plugin`` offers the ``trapbench_gate`` fixture);
- ``advisor.advise(frame, Query(...))``: the cheapest reliable backend for a problem and accuracy.
"""
