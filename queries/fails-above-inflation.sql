-- about: Projects that fail under high inflation. The one definition (the report's decision brief uses this file): a project fails under high inflation when the share of scenarios in which it is accepted (present worth >= 0) with inflation above the threshold is lower, by at least min_drop, than its share with inflation at or below the threshold (same discount rates on both sides of a full grid). Over every discount rate of the run, on its own basis: with a real discount axis the real rate is held at each grid level.
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: threshold = 0.05  (inflation, fraction per year; "high" means above it)
-- param: min_drop = 0.25  (least fall in the acceptance share, fraction: 0.25 = 25 percentage points)
-- Aggregates the narrow result_rows table by project key, then names the projects.
WITH sc AS (SELECT scenario_key, inflation FROM scenarios WHERE run_id = $run),
by_side AS (
    SELECT x.project_key,
           avg((x.present_worth >= 0)::INTEGER) FILTER (WHERE sc.inflation > $threshold) AS accept_share_above,
           avg((x.present_worth >= 0)::INTEGER) FILTER (WHERE sc.inflation <= $threshold) AS accept_share_at_or_below,
           min(sc.inflation) FILTER (WHERE x.present_worth < 0 AND sc.inflation > $threshold) AS lowest_failing_inflation
    FROM result_rows x JOIN sc USING (scenario_key)
    GROUP BY x.project_key
)
SELECT s.project_id, p.name, s.accepted_base, s.pw_base,
       round(b.accept_share_at_or_below, 4) AS accept_share_at_or_below,
       round(b.accept_share_above, 4) AS accept_share_above,
       b.lowest_failing_inflation
FROM by_side b
JOIN project_summary s ON s.run_id = $run AND s.project_key = b.project_key
JOIN run_project_names p ON p.run_id = $run AND p.project_id = s.project_id
WHERE b.accept_share_at_or_below - b.accept_share_above >= $min_drop - 1e-12
ORDER BY b.accept_share_at_or_below - b.accept_share_above DESC, s.project_id
