"""Stage 6, tables: the points table (plan joined with the store) and the summary table
(one row of derived quantities per curve, with deviations from the reference level)."""
