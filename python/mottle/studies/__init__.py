"""Studies: study files, the results store, and running their points in-process or on Dask."""
