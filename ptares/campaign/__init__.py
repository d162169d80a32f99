"""Campaigns: many injection-recovery tasks from a config grid, run on local processes or Dask, results kept per task."""
