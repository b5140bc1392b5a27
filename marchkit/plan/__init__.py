"""SoC memory test plans and the distributed runner (the only place Dask is imported)."""
