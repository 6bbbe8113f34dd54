"""Layout options: material quantities and cost, running many studies (serially, on a process pool or a
Dask cluster, sharing solutions between options of the same geometry), comparison and design search."""
