-- 003: consistency-check findings.
CREATE TABLE check_result (
    run_id VARCHAR NOT NULL,
    check_id VARCHAR NOT NULL,
    fluid_id VARCHAR NOT NULL,
    subject VARCHAR NOT NULL,
    status VARCHAR NOT NULL,
    severity VARCHAR NOT NULL,
    measured DOUBLE,
    limit_value DOUBLE,
    statistic VARCHAR,
    message VARCHAR NOT NULL,
    evidence_json VARCHAR NOT NULL,
    thresholds_json VARCHAR NOT NULL,
    input_hash VARCHAR,
    decision_id VARCHAR,
    duration_s DOUBLE,
    PRIMARY KEY (run_id, check_id, fluid_id, subject)
);
COMMENT ON TABLE check_result IS 'One finding of one check for one fluid (and subject, e.g. a triple point) in one check run.';
COMMENT ON COLUMN check_result.run_id IS 'Check run (run.run_id).';
COMMENT ON COLUMN check_result.check_id IS 'Check identifier, see fluidledger explain.';
COMMENT ON COLUMN check_result.fluid_id IS 'Fluid checked.';
COMMENT ON COLUMN check_result.subject IS 'What within the fluid was checked (e.g. triple:vapour,liquid,Ih); empty for the whole fluid.';
COMMENT ON COLUMN check_result.status IS 'pass | warn | fail | skip | error | waived.';
COMMENT ON COLUMN check_result.severity IS 'Severity of a violation: warn or fail.';
COMMENT ON COLUMN check_result.measured IS 'The measured statistic (unit given in statistic).';
COMMENT ON COLUMN check_result.limit_value IS 'The limit it was compared with.';
COMMENT ON COLUMN check_result.statistic IS 'Name and unit of the measured statistic, e.g. |z| or ratio.';
COMMENT ON COLUMN check_result.message IS 'What was found, in words a practitioner understands.';
COMMENT ON COLUMN check_result.evidence_json IS 'Numbers used and observation ids, JSON.';
COMMENT ON COLUMN check_result.thresholds_json IS 'Thresholds in force, JSON.';
COMMENT ON COLUMN check_result.input_hash IS 'Hash of the inputs the check used (fits, fixed points, observations).';
COMMENT ON COLUMN check_result.decision_id IS 'Curation decision that waived the finding, NULL otherwise.';
COMMENT ON COLUMN check_result.duration_s IS 'Time the check took for this fluid [s].';
