-- about: Switching values (the input value at which a project's accept/reject decision flips) closest to the base case, as a change from base.
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: input = any  (discount_rate, inflation, first_cost, benefits, escalation, or any)
-- param: limit = 25  (how many rows)
SELECT v.project_id, p.name, v.input, v.base_value, v.switching_value,
       round(v.switching_change, 4) AS change_from_base, v.switching_status, v.worth_base
FROM sensitivity v JOIN projects p USING (project_id)
WHERE v.run_id = $run AND v.switching_value IS NOT NULL AND ($input = 'any' OR v.input = $input)
ORDER BY abs(v.switching_change), v.project_id, v.input
LIMIT $limit
