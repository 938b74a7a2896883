-- about: Projects accepted in the base scenario that are rejected in some scenario with inflation above a threshold.
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: threshold = 0.05  (inflation, fraction per year)
WITH high AS (
    SELECT r.project_id,
           count(*) FILTER (WHERE NOT r.accepted) AS rejected_scenarios,
           count(*) AS high_scenarios,
           min(sc.inflation) FILTER (WHERE NOT r.accepted) AS lowest_failing_inflation
    FROM results r JOIN scenarios sc ON sc.run_id = r.run_id AND sc.scenario_id = r.scenario_id
    WHERE r.run_id = $run AND sc.inflation > $threshold
    GROUP BY r.project_id
)
SELECT h.project_id, p.name, s.pw_base, h.lowest_failing_inflation,
       h.rejected_scenarios, h.high_scenarios,
       round(h.rejected_scenarios / h.high_scenarios, 4) AS rejected_share_above_threshold
FROM high h
JOIN project_summary s ON s.run_id = $run AND s.project_id = h.project_id
JOIN projects p ON p.project_id = h.project_id
WHERE s.accepted_base AND h.rejected_scenarios > 0
ORDER BY rejected_share_above_threshold DESC, h.project_id
