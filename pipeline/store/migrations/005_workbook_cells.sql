-- 005: spreadsheet cells. A table may come from a worksheet of a workbook (.xlsx); each value
-- then keeps the cell it was read from, as the spreadsheet shows it (VLE!C14), beside the row.
ALTER TABLE observation ADD COLUMN T_cell_ref VARCHAR;
ALTER TABLE observation ADD COLUMN value_cell_ref VARCHAR;
COMMENT ON COLUMN observation.T_cell_ref IS 'Workbook cell of T_original as the spreadsheet shows it (sheet!cell, e.g. VLE!A14); NULL for CSV files.';
COMMENT ON COLUMN observation.value_cell_ref IS 'Workbook cell of value_original as the spreadsheet shows it (sheet!cell, e.g. VLE!C14); NULL for CSV files.';

ALTER TABLE quarantine ADD COLUMN cell_ref VARCHAR;
COMMENT ON COLUMN quarantine.cell_ref IS 'Workbook cell at fault as the spreadsheet shows it (sheet!cell, e.g. VLE!C14); NULL for CSV files and for faults of a whole row.';
COMMENT ON COLUMN quarantine.reason_code IS 'Reason code, see the batch contract: not-a-number, missing-value, non-finite, non-positive-temperature, non-positive-pressure, non-positive-value, out-of-physical-range, out-of-scale-range, bad-uncertainty, bad-row-shape, duplicate-row, missing-pressure; for workbooks also error-cell, formula-without-value and wrong-cell-type.';
COMMENT ON COLUMN raw_file.path IS 'Path relative to the raw root, POSIX separators; a workbook table adds #sheet (and !range when the entry gives one), e.g. lab/rig-c.xlsx#VLE.';
COMMENT ON COLUMN raw_file.sha256 IS 'SHA-256 of the file bytes (hex); the tables of one workbook share it.';
COMMENT ON COLUMN raw_column.column_name IS 'Column header in the CSV file or worksheet.';

CREATE OR REPLACE VIEW observation_history AS
    SELECT o.obs_id, f.fluid_id, f.boundary, f.solid_phase, o.quantity, o.T_K, o.u_T_K,
           o.value_si, o.u_value_si, v.si_unit, f.source_id, o.file_id, f.sha256 AS file_sha256,
           f.path AS file_path, o.row_number, o.T_original, t.unit AS T_unit, t.scale AS T_scale,
           o.value_original, v.unit AS value_unit, v.column_name AS value_column,
           o.T_cell_ref, o.value_cell_ref,
           f.ingest_run_id, f.superseded_by IS NULL AS is_current
    FROM observation o
    JOIN raw_file f ON f.file_id = o.file_id
    JOIN raw_column t ON t.file_id = o.file_id AND t.quantity = 'temperature'
    JOIN raw_column v ON v.file_id = o.file_id AND v.quantity = o.quantity;
COMMENT ON VIEW observation_history IS 'Every observation ever loaded with its per-file facts (fluid, boundary, source, units, scale, SHA-256) and, for workbooks, its cells; is_current is false for superseded file versions.';
