-- about: Which alternative of each group of mutually exclusive projects is preferred, in how many scenarios, optionally only where inflation exceeds a threshold. discount_rate_* are nominal rates, real_rate_* real ones; discount_basis is the basis of the run's discount axis.
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: min_inflation = -1  (count only scenarios with inflation above this, fraction per year; -1 = all)
SELECT g.group_name, g.preferred,
       count(*) AS scenarios,
       round(count(*) / sum(count(*)) OVER (PARTITION BY g.group_name), 4) AS share,
       round(avg(g.margin), 2) AS mean_margin_over_runner_up,
       min(sc.inflation) AS inflation_from, max(sc.inflation) AS inflation_to,
       min(sc.discount_rate) AS discount_rate_from, max(sc.discount_rate) AS discount_rate_to,
       min(sc.real_rate) AS real_rate_from, max(sc.real_rate) AS real_rate_to,
       any_value(ru.discount_basis) AS discount_basis
FROM group_decisions g JOIN scenarios sc ON sc.run_id = g.run_id AND sc.scenario_id = g.scenario_id
JOIN runs ru ON ru.run_id = g.run_id
WHERE g.run_id = $run AND sc.inflation > $min_inflation
GROUP BY g.group_name, g.preferred
ORDER BY g.group_name, scenarios DESC
