-- about: Every run in the database with its status, size and timing, and whether the portfolio was reloaded since.
SELECT run_id, status, started_at, finished_at, project_count, scenario_count, discount_basis, timing,
       after_tax, chunks_done, chunk_count, message,
       CASE WHEN inputs_hash IS NOT DISTINCT FROM (SELECT inputs_hash FROM loads ORDER BY load_id DESC LIMIT 1)
            THEN 'current' ELSE 'portfolio reloaded since this run' END AS portfolio
FROM runs ORDER BY started_at DESC
