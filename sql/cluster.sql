-- The Dask extra (screening/cluster.py): per-chunk results written as Parquet partitions by the tasks.

-- name: read_chunk_result
-- One result frame of one chunk, as the task wrote it.
SELECT * FROM read_parquet($path);
