-- about: Indifference frontier points of a group of alternatives (where the two best alternatives are worth the same), in drawing order.
-- param: run = latest  (run id; "latest" = the newest finished run)
-- param: group = any  (group name, or any)
SELECT group_name, alternative_a, alternative_b, x_axis, x, y_axis, y, segment, point, kind
FROM frontiers
WHERE run_id = $run AND ($group = 'any' OR group_name = $group)
ORDER BY group_name, segment, point
