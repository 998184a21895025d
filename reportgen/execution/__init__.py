"""Working on the pairs: one pair's work (``work``), and where it runs (``executors``: this process, local
worker processes, or a dask cluster; ``workers``: what runs inside a worker)."""
