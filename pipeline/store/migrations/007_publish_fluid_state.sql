-- 007: what an incremental publish needs to copy a fluid's rows from the release before
-- (pipeline.publish.incremental). Store-only: the published file does not repeat this step.
CREATE TABLE release_fluid (
    release_id VARCHAR NOT NULL,
    fluid_id VARCHAR NOT NULL,
    inputs_sha256 VARCHAR NOT NULL,
    unresolved_json VARCHAR NOT NULL,
    spans_json VARCHAR NOT NULL,
    PRIMARY KEY (release_id, fluid_id)
);
COMMENT ON TABLE release_fluid IS 'One row per release and fluid with inputs: the digest of the fluid''s inputs that its released rows are a function of, so that the next publish copies the rows of fluids whose digest is unchanged instead of recomputing them.';
COMMENT ON COLUMN release_fluid.release_id IS 'Release (release.release_id).';
COMMENT ON COLUMN release_fluid.fluid_id IS 'Fluid (fluid.fluid_id, or the fluid id any input row of the release names).';
COMMENT ON COLUMN release_fluid.inputs_sha256 IS 'SHA-256 of the sort-keyed JSON of the fluid''s inputs: its rows of every input table, the raw files and sources they name, the check findings about it, the policy, the curation decisions about it and the pipeline version.';
COMMENT ON COLUMN release_fluid.unresolved_json IS 'Constants of the fluid left without a recommended value, with the reason (JSON list, as fluidledger publish reports them).';
COMMENT ON COLUMN release_fluid.spans_json IS 'Where the fluid''s rows stand in the text exports of the release: per table, byte ranges [start, end) in its .json and .csv files and the number of rows (JSON).';
