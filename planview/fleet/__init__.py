"""Many plans at once: server logs and folders into one table (`batch`), two plans side by side
(`compare`), a CI gate against a baseline (`gate`), the summary a DBA acts on (`summary`), and
the same batch on a Dask cluster (`dask_run`)."""
