-- about: Internal rates of return per project and inflation level, with the count of roots (several roots = no single IRR).
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: inflation = 0.03  (inflation level, fraction per year; the nearest grid level is used)
WITH level AS (
    SELECT inflation FROM irr_results WHERE run_id = $run
    GROUP BY inflation ORDER BY abs(inflation - $inflation) LIMIT 1
)
SELECT i.project_id, p.name, i.inflation, i.status, i.root_count, i.irr_nominal, i.irr_real,
       (SELECT string_agg(round(irr_real, 6)::VARCHAR, '; ' ORDER BY root_index)
        FROM irr_roots r WHERE r.run_id = i.run_id AND r.project_id = i.project_id AND r.inflation = i.inflation) AS real_irr_roots
FROM irr_results i JOIN level USING (inflation) JOIN run_project_names p ON p.run_id = $run AND p.project_id = i.project_id
WHERE i.run_id = $run
ORDER BY i.irr_real DESC NULLS LAST, i.project_id
