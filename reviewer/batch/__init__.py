"""Scans of many movies at once: find them (discover.py), scan each as `reviewer scan` does (job.py) on
a Dask cluster -- local processes, a running scheduler or a job queue (engine.py) -- and tabulate the
outcome (summary.py). The scheduler only ever sees paths, settings and small result rows; frames are
read by the workers from the shared file system, features written by them to the cache."""
