-- 005: a run stopped by Ctrl-C ends with status 'interrupted' (issue 13); only the column's
-- documentation changes.
COMMENT ON COLUMN run.status IS 'running | ok | failed | error | no-changes | interrupted (stopped by Ctrl-C; its committed batches are complete, the rest was rolled back).';
