-- about: Projects that inflation above a threshold hurts: accepted in fewer scenarios above the threshold than at or below it (same discount rates compared).
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: threshold = 0.05  (inflation, fraction per year)
WITH by_side AS (
    SELECT r.project_id,
           avg(r.accepted::INTEGER) FILTER (WHERE sc.inflation > $threshold) AS accept_share_above,
           avg(r.accepted::INTEGER) FILTER (WHERE sc.inflation <= $threshold) AS accept_share_at_or_below,
           min(sc.inflation) FILTER (WHERE NOT r.accepted AND sc.inflation > $threshold) AS lowest_failing_inflation
    FROM results r JOIN scenarios sc ON sc.run_id = r.run_id AND sc.scenario_id = r.scenario_id
    WHERE r.run_id = $run
    GROUP BY r.project_id
)
SELECT b.project_id, p.name, s.accepted_base, s.pw_base,
       round(b.accept_share_at_or_below, 4) AS accept_share_at_or_below,
       round(b.accept_share_above, 4) AS accept_share_above,
       b.lowest_failing_inflation
FROM by_side b
JOIN project_summary s ON s.run_id = $run AND s.project_id = b.project_id
JOIN projects p ON p.project_id = b.project_id
WHERE b.accept_share_above < b.accept_share_at_or_below
ORDER BY b.accept_share_at_or_below - b.accept_share_above DESC, b.project_id
