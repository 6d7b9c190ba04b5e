-- 006: released values name the workbook cells they derive from. The published file repeats
-- this step after 004 (pipeline.publish.published.release_ddl).
ALTER TABLE release_provenance ADD COLUMN was_derived_from.element.cells VARCHAR[];
COMMENT ON COLUMN release_provenance.was_derived_from IS 'prov:wasDerivedFrom - entities: fixed_point (fp_id, batch.toml entry number in row_numbers), stated_constant (const_id, entry number), observations (raw file id, data rows and obs ids; cells: the workbook cells of the values, one per obs id, empty for CSV files, NULL in releases made before cells were kept), fit (fit_id), value (another released value_id); value_si and u_si of candidates; used and a note on why an entity was left out.';
