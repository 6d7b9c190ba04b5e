-- 001: the ingest tables. Every column carries its SI unit in its name where one applies.
CREATE TABLE schema_version (
    version INTEGER NOT NULL,
    applied_at TIMESTAMP NOT NULL,
    description VARCHAR NOT NULL
);
COMMENT ON TABLE schema_version IS 'One row per applied migration of the store schema (a numbered ladder).';
COMMENT ON COLUMN schema_version.version IS 'Migration number (the store is at the highest one).';
COMMENT ON COLUMN schema_version.applied_at IS 'UTC time the migration was applied.';
COMMENT ON COLUMN schema_version.description IS 'What the migration did.';

CREATE TABLE run (
    run_id VARCHAR PRIMARY KEY,
    kind VARCHAR NOT NULL,
    started_at TIMESTAMP NOT NULL,
    finished_at TIMESTAMP,
    pipeline_version VARCHAR NOT NULL,
    parameters_json VARCHAR NOT NULL,
    status VARCHAR NOT NULL,
    summary_json VARCHAR
);
COMMENT ON TABLE run IS 'One row per invocation of a stage (ingest, fit, check, publish, nightly): what ran, with which parameters, and how it ended.';
COMMENT ON COLUMN run.run_id IS 'Run identifier (UTC timestamp plus a random suffix); referenced by rows the run wrote.';
COMMENT ON COLUMN run.kind IS 'Stage: ingest | fit | check | publish | nightly.';
COMMENT ON COLUMN run.started_at IS 'UTC start time.';
COMMENT ON COLUMN run.finished_at IS 'UTC end time (NULL while running or when the process died).';
COMMENT ON COLUMN run.pipeline_version IS 'FluidLedger version that ran.';
COMMENT ON COLUMN run.parameters_json IS 'Command-line parameters of the run, as sort-keyed JSON.';
COMMENT ON COLUMN run.status IS 'running | ok | failed | error | no-changes.';
COMMENT ON COLUMN run.summary_json IS 'Machine-readable result record of the stage, JSON.';

CREATE TABLE fluid (
    fluid_id VARCHAR PRIMARY KEY,
    name VARCHAR NOT NULL,
    formula VARCHAR,
    cas_rn VARCHAR,
    molar_mass_kg_mol DOUBLE NOT NULL,
    updated_run_id VARCHAR
);
COMMENT ON TABLE fluid IS 'Pure fluids known to the store, from raw/fluids.toml.';
COMMENT ON COLUMN fluid.fluid_id IS 'Slug identifier, e.g. water, carbon-dioxide.';
COMMENT ON COLUMN fluid.name IS 'Common name.';
COMMENT ON COLUMN fluid.formula IS 'Chemical formula.';
COMMENT ON COLUMN fluid.cas_rn IS 'CAS Registry Number.';
COMMENT ON COLUMN fluid.molar_mass_kg_mol IS 'Molar mass [kg/mol]; converts molar and mass-based units.';
COMMENT ON COLUMN fluid.updated_run_id IS 'Ingest run that last wrote this row.';

CREATE TABLE source (
    source_id VARCHAR PRIMARY KEY,
    kind VARCHAR NOT NULL,
    citation VARCHAR NOT NULL,
    doi VARCHAR,
    license VARCHAR,
    batch VARCHAR NOT NULL,
    updated_run_id VARCHAR
);
COMMENT ON TABLE source IS 'Where data came from: one row per batch source (a standard, a paper, a lab campaign).';
COMMENT ON COLUMN source.source_id IS 'Slug identifier declared in batch.toml [source].id.';
COMMENT ON COLUMN source.kind IS 'standard | evaluated | literature | measurement | estimate.';
COMMENT ON COLUMN source.citation IS 'Full citation as given by the batch.';
COMMENT ON COLUMN source.doi IS 'DOI, when the batch gives one.';
COMMENT ON COLUMN source.license IS 'Terms under which the data may be used.';
COMMENT ON COLUMN source.batch IS 'Batch folder (relative to the raw root) that declared the source.';
COMMENT ON COLUMN source.updated_run_id IS 'Ingest run that last wrote this row.';

CREATE SEQUENCE file_id_seq START 1;
CREATE TABLE raw_file (
    file_id BIGINT PRIMARY KEY,
    sha256 VARCHAR NOT NULL,
    mapping_sha256 VARCHAR NOT NULL,
    path VARCHAR NOT NULL,
    batch VARCHAR NOT NULL,
    role VARCHAR NOT NULL,
    source_id VARCHAR NOT NULL,
    table_index INTEGER,
    fluid_id VARCHAR,
    boundary VARCHAR,
    solid_phase VARCHAR,
    size_bytes BIGINT NOT NULL,
    rows_read BIGINT NOT NULL,
    rows_loaded BIGINT NOT NULL,
    rows_quarantined BIGINT NOT NULL,
    ingest_run_id VARCHAR NOT NULL,
    ingested_at TIMESTAMP NOT NULL,
    superseded_by BIGINT,
    superseded_run_id VARCHAR
);
COMMENT ON TABLE raw_file IS 'Every ingested raw file version, identified by content hash; rows_read = rows_loaded + rows_quarantined.';
COMMENT ON COLUMN raw_file.file_id IS 'File version identifier (one per load of a path).';
COMMENT ON COLUMN raw_file.mapping_sha256 IS 'SHA-256 of how the file is read: its batch.toml [[table]] entry and [source], sort-keyed JSON; a change re-reads the file.';
COMMENT ON COLUMN raw_file.sha256 IS 'SHA-256 of the file bytes (hex).';
COMMENT ON COLUMN raw_file.path IS 'Path relative to the raw root, POSIX separators.';
COMMENT ON COLUMN raw_file.batch IS 'Batch folder relative to the raw root.';
COMMENT ON COLUMN raw_file.role IS 'manifest (batch.toml, holds fixed points and constants) | table (a CSV file).';
COMMENT ON COLUMN raw_file.source_id IS 'Source declared by the batch.';
COMMENT ON COLUMN raw_file.table_index IS 'Position of the [[table]] entry in batch.toml (0-based); NULL for the manifest.';
COMMENT ON COLUMN raw_file.fluid_id IS 'Fluid of the table; NULL for the manifest.';
COMMENT ON COLUMN raw_file.boundary IS 'Phase boundary of the table: liquid-vapour | solid-liquid | solid-vapour | solid-solid.';
COMMENT ON COLUMN raw_file.solid_phase IS 'Solid phase label for polymorphs (empty when the fluid has one solid).';
COMMENT ON COLUMN raw_file.size_bytes IS 'File size [bytes].';
COMMENT ON COLUMN raw_file.rows_read IS 'Data rows (or fixed-point entries) read from the file.';
COMMENT ON COLUMN raw_file.rows_loaded IS 'Rows that became observations or fixed points.';
COMMENT ON COLUMN raw_file.rows_quarantined IS 'Rows that went to quarantine.';
COMMENT ON COLUMN raw_file.ingest_run_id IS 'Ingest run that loaded this version.';
COMMENT ON COLUMN raw_file.ingested_at IS 'UTC time of the load.';
COMMENT ON COLUMN raw_file.superseded_by IS 'file_id of the newer version of the same path (0 when the file was removed from raw/); NULL while current.';
COMMENT ON COLUMN raw_file.superseded_run_id IS 'Ingest run that superseded this version.';

CREATE TABLE raw_column (
    file_id BIGINT NOT NULL,
    quantity VARCHAR NOT NULL,
    column_name VARCHAR NOT NULL,
    unit VARCHAR NOT NULL,
    scale VARCHAR,
    si_unit VARCHAR NOT NULL,
    uncertainty_rule VARCHAR,
    PRIMARY KEY (file_id, quantity)
);
COMMENT ON TABLE raw_column IS 'How each mapped column of a raw table file was read: the per-file facts every observation of that file shares.';
COMMENT ON COLUMN raw_column.file_id IS 'Raw file version (raw_file.file_id).';
COMMENT ON COLUMN raw_column.quantity IS 'temperature, or the quantity of the value column: pressure | rho_liquid | rho_vapour | rho_solid | h_vaporization | h_fusion | h_sublimation.';
COMMENT ON COLUMN raw_column.column_name IS 'CSV column header.';
COMMENT ON COLUMN raw_column.unit IS 'Unit declared in batch.toml for the column.';
COMMENT ON COLUMN raw_column.scale IS 'Temperature scale declared (ITS-90, IPTS-68); NULL for other quantities.';
COMMENT ON COLUMN raw_column.si_unit IS 'SI unit the values were converted to (K, Pa, kg/m^3, J/mol).';
COMMENT ON COLUMN raw_column.uncertainty_rule IS 'How the standard uncertainty was obtained (constant, relative, column; coverage factor), JSON.';

CREATE TABLE observation (
    obs_id BIGINT NOT NULL,
    file_id BIGINT NOT NULL,
    row_number BIGINT NOT NULL,
    quantity VARCHAR NOT NULL,
    T_K DOUBLE NOT NULL,
    u_T_K DOUBLE,
    value_si DOUBLE NOT NULL,
    u_value_si DOUBLE,
    T_original VARCHAR NOT NULL,
    value_original VARCHAR NOT NULL
);
COMMENT ON TABLE observation IS 'One measured or tabulated value on a phase boundary, normalised to SI and ITS-90. Per-file facts (fluid, boundary, source, units, hash) live in raw_file and raw_column; the views observation_current and observation_history put them together.';
COMMENT ON COLUMN observation.obs_id IS 'Observation identifier (unique; stable for a file version).';
COMMENT ON COLUMN observation.file_id IS 'Raw file version (raw_file.file_id): gives fluid, boundary, solid phase, source, SHA-256.';
COMMENT ON COLUMN observation.row_number IS 'Data row in the raw file (1 = first line after the header).';
COMMENT ON COLUMN observation.quantity IS 'pressure [Pa] | rho_liquid, rho_vapour, rho_solid [kg/m^3] | h_vaporization, h_fusion, h_sublimation [J/mol].';
COMMENT ON COLUMN observation.T_K IS 'Temperature on ITS-90 [K].';
COMMENT ON COLUMN observation.u_T_K IS 'Standard uncertainty (k=1) of T_K [K]; NULL when not stated.';
COMMENT ON COLUMN observation.value_si IS 'Value of the quantity in SI [Pa, kg/m^3 or J/mol].';
COMMENT ON COLUMN observation.u_value_si IS 'Standard uncertainty (k=1) of value_si [same unit]; NULL when not stated.';
COMMENT ON COLUMN observation.T_original IS 'Temperature cell exactly as written in the raw file.';
COMMENT ON COLUMN observation.value_original IS 'Value cell exactly as written in the raw file.';

CREATE SEQUENCE fp_id_seq START 1;
CREATE TABLE fixed_point (
    fp_id BIGINT PRIMARY KEY,
    fluid_id VARCHAR NOT NULL,
    kind VARCHAR NOT NULL,
    phases VARCHAR NOT NULL,
    T_K DOUBLE NOT NULL,
    u_T_K DOUBLE,
    p_Pa DOUBLE,
    u_p_Pa DOUBLE,
    rho_kg_m3 DOUBLE,
    u_rho_kg_m3 DOUBLE,
    source_id VARCHAR NOT NULL,
    file_id BIGINT NOT NULL,
    file_sha256 VARCHAR NOT NULL,
    file_path VARCHAR NOT NULL,
    entry_number INTEGER NOT NULL,
    original_json VARCHAR NOT NULL,
    ingest_run_id VARCHAR NOT NULL
);
COMMENT ON TABLE fixed_point IS 'A stated triple or critical point, normalised to SI and ITS-90.';
COMMENT ON COLUMN fixed_point.fp_id IS 'Fixed-point identifier.';
COMMENT ON COLUMN fixed_point.fluid_id IS 'Fluid (fluid.fluid_id).';
COMMENT ON COLUMN fixed_point.kind IS 'triple | critical.';
COMMENT ON COLUMN fixed_point.phases IS 'Comma-separated phases meeting at the point (vapour,liquid,solid or polymorph labels); liquid,vapour for a critical point.';
COMMENT ON COLUMN fixed_point.T_K IS 'Temperature on ITS-90 [K].';
COMMENT ON COLUMN fixed_point.u_T_K IS 'Standard uncertainty of T_K [K].';
COMMENT ON COLUMN fixed_point.p_Pa IS 'Pressure [Pa] (NULL when the source states none).';
COMMENT ON COLUMN fixed_point.u_p_Pa IS 'Standard uncertainty of p_Pa [Pa].';
COMMENT ON COLUMN fixed_point.rho_kg_m3 IS 'Density [kg/m^3] (critical density; NULL when not stated).';
COMMENT ON COLUMN fixed_point.u_rho_kg_m3 IS 'Standard uncertainty of rho_kg_m3 [kg/m^3].';
COMMENT ON COLUMN fixed_point.source_id IS 'Source (source.source_id).';
COMMENT ON COLUMN fixed_point.file_id IS 'Raw file version (raw_file.file_id).';
COMMENT ON COLUMN fixed_point.file_sha256 IS 'SHA-256 of the batch.toml version that stated the point.';
COMMENT ON COLUMN fixed_point.file_path IS 'Path of that batch.toml relative to the raw root.';
COMMENT ON COLUMN fixed_point.entry_number IS 'Position of the [[fixed_point]] entry in batch.toml (1-based).';
COMMENT ON COLUMN fixed_point.original_json IS 'The entry exactly as parsed from batch.toml, JSON.';
COMMENT ON COLUMN fixed_point.ingest_run_id IS 'Ingest run that loaded the row.';

CREATE SEQUENCE const_id_seq START 1;
CREATE TABLE stated_constant (
    const_id BIGINT PRIMARY KEY,
    fluid_id VARCHAR NOT NULL,
    name VARCHAR NOT NULL,
    value_si DOUBLE NOT NULL,
    u_si DOUBLE,
    si_unit VARCHAR NOT NULL,
    source_id VARCHAR NOT NULL,
    file_id BIGINT NOT NULL,
    file_sha256 VARCHAR NOT NULL,
    file_path VARCHAR NOT NULL,
    entry_number INTEGER NOT NULL,
    original_json VARCHAR NOT NULL,
    ingest_run_id VARCHAR NOT NULL
);
COMMENT ON TABLE stated_constant IS 'A scalar constant stated by a source (acentric factor, normal boiling temperature, enthalpy of fusion...).';
COMMENT ON COLUMN stated_constant.const_id IS 'Constant identifier.';
COMMENT ON COLUMN stated_constant.fluid_id IS 'Fluid (fluid.fluid_id).';
COMMENT ON COLUMN stated_constant.name IS 'acentric_factor | normal_boiling_T | h_fusion_triple | h_vaporization_triple | h_sublimation_triple.';
COMMENT ON COLUMN stated_constant.value_si IS 'Value in SI (K, J/mol, or 1 for the acentric factor).';
COMMENT ON COLUMN stated_constant.u_si IS 'Standard uncertainty (k=1), same unit.';
COMMENT ON COLUMN stated_constant.si_unit IS 'SI unit of value_si (K, J/mol, 1).';
COMMENT ON COLUMN stated_constant.source_id IS 'Source (source.source_id).';
COMMENT ON COLUMN stated_constant.file_id IS 'Raw file version (raw_file.file_id).';
COMMENT ON COLUMN stated_constant.file_sha256 IS 'SHA-256 of the batch.toml version that stated it.';
COMMENT ON COLUMN stated_constant.file_path IS 'Path of that batch.toml relative to the raw root.';
COMMENT ON COLUMN stated_constant.entry_number IS 'Position of the [[constant]] entry in batch.toml (1-based).';
COMMENT ON COLUMN stated_constant.original_json IS 'The entry exactly as parsed, JSON.';
COMMENT ON COLUMN stated_constant.ingest_run_id IS 'Ingest run that loaded the row.';

CREATE SEQUENCE q_id_seq START 1;
CREATE TABLE quarantine (
    q_id BIGINT PRIMARY KEY,
    file_id BIGINT NOT NULL,
    file_sha256 VARCHAR NOT NULL,
    file_path VARCHAR NOT NULL,
    row_number BIGINT NOT NULL,
    column_name VARCHAR,
    raw_text VARCHAR,
    reason_code VARCHAR NOT NULL,
    message VARCHAR NOT NULL,
    ingest_run_id VARCHAR NOT NULL
);
COMMENT ON TABLE quarantine IS 'Raw rows that could not be loaded, kept with the reason; nothing read is lost.';
COMMENT ON COLUMN quarantine.q_id IS 'Quarantine entry identifier.';
COMMENT ON COLUMN quarantine.file_id IS 'Raw file version (raw_file.file_id).';
COMMENT ON COLUMN quarantine.file_sha256 IS 'SHA-256 of the raw file version.';
COMMENT ON COLUMN quarantine.file_path IS 'Raw file path relative to the raw root.';
COMMENT ON COLUMN quarantine.row_number IS 'Data row in the raw file (1 = first row after the header; entry number for batch.toml).';
COMMENT ON COLUMN quarantine.column_name IS 'Raw column (or batch.toml key) at fault, NULL when the whole row is at fault.';
COMMENT ON COLUMN quarantine.raw_text IS 'The raw row (or cell) text.';
COMMENT ON COLUMN quarantine.reason_code IS 'Reason code, see the batch contract: not-a-number, missing-value, non-finite, non-positive-temperature, non-positive-pressure, out-of-scale-range, bad-row-shape, duplicate-row, missing-pressure.';
COMMENT ON COLUMN quarantine.message IS 'Message naming file, row and column.';
COMMENT ON COLUMN quarantine.ingest_run_id IS 'Ingest run that quarantined the row.';

CREATE VIEW raw_file_current AS
    SELECT * FROM raw_file WHERE superseded_by IS NULL;
COMMENT ON VIEW raw_file_current IS 'Current version of every raw file path (superseded versions excluded).';

CREATE VIEW observation_history AS
    SELECT o.obs_id, f.fluid_id, f.boundary, f.solid_phase, o.quantity, o.T_K, o.u_T_K,
           o.value_si, o.u_value_si, v.si_unit, f.source_id, o.file_id, f.sha256 AS file_sha256,
           f.path AS file_path, o.row_number, o.T_original, t.unit AS T_unit, t.scale AS T_scale,
           o.value_original, v.unit AS value_unit, v.column_name AS value_column,
           f.ingest_run_id, f.superseded_by IS NULL AS is_current
    FROM observation o
    JOIN raw_file f ON f.file_id = o.file_id
    JOIN raw_column t ON t.file_id = o.file_id AND t.quantity = 'temperature'
    JOIN raw_column v ON v.file_id = o.file_id AND v.quantity = o.quantity;
COMMENT ON VIEW observation_history IS 'Every observation ever loaded with its per-file facts (fluid, boundary, source, units, scale, SHA-256); is_current is false for superseded file versions.';

CREATE VIEW observation_current AS
    SELECT * EXCLUDE (is_current) FROM observation_history WHERE is_current;
COMMENT ON VIEW observation_current IS 'Observations of current raw file versions with their per-file facts; superseded versions stay in observation_history.';

CREATE VIEW fixed_point_current AS
    SELECT p.* FROM fixed_point p
    JOIN raw_file f ON f.file_id = p.file_id
    WHERE f.superseded_by IS NULL;
COMMENT ON VIEW fixed_point_current IS 'Fixed points stated by current batch.toml versions.';

CREATE VIEW stated_constant_current AS
    SELECT c.* FROM stated_constant c
    JOIN raw_file f ON f.file_id = c.file_id
    WHERE f.superseded_by IS NULL;
COMMENT ON VIEW stated_constant_current IS 'Stated constants of current batch.toml versions.';

CREATE VIEW quarantine_current AS
    SELECT q.* FROM quarantine q
    JOIN raw_file f ON f.file_id = q.file_id
    WHERE f.superseded_by IS NULL;
COMMENT ON VIEW quarantine_current IS 'Quarantined rows of current raw file versions.';
