-- Explicit transactions (DuckDB's context manager only closes; it never commits), and the session's settings.

-- name: tx_begin
BEGIN TRANSACTION;

-- name: tx_commit
COMMIT;

-- name: tx_rollback
ROLLBACK;

-- name: session_quiet
-- No progress bar: DuckDB draws one on stderr for a long statement (a cron mail, a log file).
SET enable_progress_bar = false;
