-- about: Groups whose alternatives are all cost-only (no benefit lines): the least-cost alternative and in how many scenarios it is preferred, with the comparison basis (not accept/reject candidates).
-- param: run = latest  (run id; "latest" = the newest finished run)
SELECT g.group_name, g.preferred, count(*) AS scenarios,
       round(count(*) / sum(count(*)) OVER (PARTITION BY g.group_name), 4) AS share,
       any_value(g.basis) AS basis, round(avg(g.preferred_worth), 2) AS mean_preferred_worth
FROM group_decisions g
WHERE g.run_id = $run AND g.least_cost
GROUP BY g.group_name, g.preferred
ORDER BY g.group_name, scenarios DESC, g.preferred
