-- Explicit transactions (DuckDB's context manager only closes; it never commits).

-- name: tx_begin
BEGIN TRANSACTION;

-- name: tx_commit
COMMIT;

-- name: tx_rollback
ROLLBACK;
