"""Archive jobs: the same work on every catalogued run, serially or in parallel on Dask.

* `parallel` — one task per run, serially, on local Dask worker processes or on an
  existing Dask cluster; results in the order of the runs whatever the workers;
* `fingerprint` — which forcelens modules and libraries computed a result, so that a
  result from a worker running other code is refused;
* `progress` — the progress bar over runs;
* `impact` — one run replayed with its own profile and with a corrected one: the
  settled readings and load changes, old and new;
* `impact_report` — the impact table (CSV, HTML), its record and its summary;
* `audit_table` — the summary table of ``forcelens audit --all``.

The commands are ``ui.commands.impact`` and ``ui.commands.audit`` (``--all``). Nothing
here imports Dask at module level: ``forcelens --help`` stays light, and without Dask the
jobs run serially.
"""
