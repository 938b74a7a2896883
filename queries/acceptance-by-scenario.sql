-- about: Number and share of projects accepted in each scenario (discount rate x inflation).
-- param: run = latest  (run id; "latest" = the newest finished run)
SELECT sc.scenario_id, sc.discount_rate, sc.real_rate, sc.inflation,
       count(*) FILTER (WHERE r.accepted) AS accepted_projects,
       round(avg(r.accepted::INTEGER), 4) AS accepted_share,
       sum(r.present_worth) FILTER (WHERE r.accepted) AS accepted_present_worth
FROM results r JOIN scenarios sc ON sc.run_id = r.run_id AND sc.scenario_id = r.scenario_id
WHERE r.run_id = $run
GROUP BY ALL ORDER BY sc.scenario_id
