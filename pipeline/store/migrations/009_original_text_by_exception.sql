-- 009: an observation keeps the number read from each of its cells, and the cell's text only
-- where the text is not the canonical rendering of that number (DuckDB's CAST(number AS
-- VARCHAR), the shortest text that reads back as the same double; issue 14). Rows written
-- before keep their texts (T_parsed and value_parsed NULL): observation_history gives back the
-- text as written for both.
ALTER TABLE observation ALTER COLUMN T_original DROP NOT NULL;
ALTER TABLE observation ALTER COLUMN value_original DROP NOT NULL;
ALTER TABLE observation ADD COLUMN T_parsed DOUBLE;
ALTER TABLE observation ADD COLUMN value_parsed DOUBLE;
COMMENT ON COLUMN observation.T_original IS 'Temperature cell exactly as written in the raw file; NULL when it is CAST(T_parsed AS VARCHAR) (observation_history gives the text either way).';
COMMENT ON COLUMN observation.value_original IS 'Value cell exactly as written in the raw file; NULL when it is CAST(value_parsed AS VARCHAR) (observation_history gives the text either way).';
COMMENT ON COLUMN observation.T_parsed IS 'Number read from the temperature cell, in the unit and scale of the file (before conversion); NULL for rows written before migration 009, which keep their text.';
COMMENT ON COLUMN observation.value_parsed IS 'Number read from the value cell, in the unit of the file (before conversion); NULL for rows written before migration 009, which keep their text.';

CREATE OR REPLACE VIEW observation_history AS
    SELECT o.obs_id, f.fluid_id, f.boundary, f.solid_phase, o.quantity, o.T_K, o.u_T_K,
           o.value_si, o.u_value_si, v.si_unit, f.source_id, o.file_id, f.sha256 AS file_sha256,
           f.path AS file_path, o.row_number,
           coalesce(o.T_original, CAST(o.T_parsed AS VARCHAR)) AS T_original,
           t.unit AS T_unit, t.scale AS T_scale,
           coalesce(o.value_original, CAST(o.value_parsed AS VARCHAR)) AS value_original,
           v.unit AS value_unit, v.column_name AS value_column,
           o.T_cell_ref, o.value_cell_ref,
           f.ingest_run_id, f.superseded_by IS NULL AS is_current
    FROM observation o
    JOIN raw_file f ON f.file_id = o.file_id
    JOIN raw_column t ON t.file_id = o.file_id AND t.quantity = 'temperature'
    JOIN raw_column v ON v.file_id = o.file_id AND v.quantity = o.quantity;
COMMENT ON VIEW observation_history IS 'Every observation ever loaded with its per-file facts (fluid, boundary, source, units, scale, SHA-256), its cells as written and, for workbooks, their places; is_current is false for superseded file versions.';
