-- about: Number and share of projects accepted in each scenario (discount rate x inflation).
-- param: run = latest  (run id; "latest" = the newest finished run)
-- Reads the narrow result_rows table by scenario key (the results view would join every row to
-- its project, which this count does not need).
WITH per_scenario AS (
    SELECT x.scenario_key,
           count(*) FILTER (WHERE x.present_worth >= 0) AS accepted_projects,
           avg((x.present_worth >= 0)::INTEGER) AS accepted_share,
           sum(x.present_worth) FILTER (WHERE x.present_worth >= 0) AS accepted_present_worth
    FROM result_rows x
    WHERE x.scenario_key IN (SELECT scenario_key FROM scenarios WHERE run_id = $run)
    GROUP BY x.scenario_key
)
SELECT sc.scenario_id, sc.discount_rate, sc.real_rate, sc.inflation, a.accepted_projects,
       round(a.accepted_share, 4) AS accepted_share, a.accepted_present_worth
FROM per_scenario a JOIN scenarios sc ON sc.run_id = $run AND sc.scenario_key = a.scenario_key
ORDER BY sc.scenario_id
