-- 004: curated releases (immutable snapshots keyed by release_id) and the views of the latest one.
CREATE TABLE release (
    release_id VARCHAR PRIMARY KEY,
    fingerprint VARCHAR NOT NULL,
    pipeline_version VARCHAR NOT NULL,
    check_run_id VARCHAR NOT NULL,
    with_failed_checks BOOLEAN NOT NULL,
    checks_failed INTEGER NOT NULL,
    checks_errored INTEGER NOT NULL,
    checks_warned INTEGER NOT NULL,
    n_constants INTEGER NOT NULL,
    n_curves INTEGER NOT NULL,
    n_provenance INTEGER NOT NULL,
    policy_sha256 VARCHAR NOT NULL,
    policy_json VARCHAR NOT NULL,
    decisions_json VARCHAR NOT NULL,
    created_at TIMESTAMP NOT NULL,
    publish_run_id VARCHAR NOT NULL
);
COMMENT ON TABLE release IS 'One row per curated release: an immutable snapshot of recommended constants, curves and their provenance, resting on one check run. Content rows live in release_constant, release_curve and release_provenance.';
COMMENT ON COLUMN release.release_id IS 'Release identifier: the name given to fluidledger publish --release, else r- and the first 12 hex digits of the fingerprint.';
COMMENT ON COLUMN release.fingerprint IS 'SHA-256 of the sort-keyed JSON of every input of the release (fits and their input hashes, fixed points, stated constants, sources, check statuses, policy, decisions, pipeline version); equal fingerprints give identical content.';
COMMENT ON COLUMN release.pipeline_version IS 'FluidLedger version that made the release.';
COMMENT ON COLUMN release.check_run_id IS 'Check run (run.run_id) the release rests on: the latest check run when it was made.';
COMMENT ON COLUMN release.with_failed_checks IS 'True when checks of that run failed or errored and the release was made anyway (fluidledger publish --allow-failures).';
COMMENT ON COLUMN release.checks_failed IS 'Findings with status fail in the check run.';
COMMENT ON COLUMN release.checks_errored IS 'Findings with status error in the check run.';
COMMENT ON COLUMN release.checks_warned IS 'Findings with status warn in the check run.';
COMMENT ON COLUMN release.n_constants IS 'Rows of release_constant for this release.';
COMMENT ON COLUMN release.n_curves IS 'Rows of release_curve for this release.';
COMMENT ON COLUMN release.n_provenance IS 'Rows of release_provenance for this release (one per constant and per curve).';
COMMENT ON COLUMN release.policy_sha256 IS 'SHA-256 of the sort-keyed JSON of the recommendation policy in force.';
COMMENT ON COLUMN release.policy_json IS 'The recommendation policy in force (pipeline/publish/policy.toml or --policy), JSON.';
COMMENT ON COLUMN release.decisions_json IS 'Curation decisions honoured (excluded and preferred sources), JSON; empty lists when none.';
COMMENT ON COLUMN release.created_at IS 'UTC time the release was first made (kept out of the exported files so that equal inputs give equal files).';
COMMENT ON COLUMN release.publish_run_id IS 'Publish run (run.run_id) that made the release.';

CREATE SEQUENCE release_publication_seq START 1;
CREATE TABLE release_publication (
    publication_seq BIGINT PRIMARY KEY,
    release_id VARCHAR NOT NULL,
    published_at TIMESTAMP NOT NULL,
    publish_run_id VARCHAR NOT NULL,
    export_dir VARCHAR NOT NULL,
    published_file VARCHAR NOT NULL
);
COMMENT ON TABLE release_publication IS 'Every time a release was published (made, or re-published unchanged); the latest row names the release the curated_* views show.';
COMMENT ON COLUMN release_publication.publication_seq IS 'Order of publication (increasing).';
COMMENT ON COLUMN release_publication.release_id IS 'Release published (release.release_id).';
COMMENT ON COLUMN release_publication.published_at IS 'UTC time of the publication.';
COMMENT ON COLUMN release_publication.publish_run_id IS 'Publish run (run.run_id).';
COMMENT ON COLUMN release_publication.export_dir IS 'Folder of the Parquet, CSV and JSON exports with manifest.json.';
COMMENT ON COLUMN release_publication.published_file IS 'Path of the read-only DuckDB file for readers (published.duckdb) swapped in by this publication.';

CREATE TABLE release_constant (
    release_id VARCHAR NOT NULL,
    value_id VARCHAR NOT NULL,
    fluid_id VARCHAR NOT NULL,
    point VARCHAR NOT NULL,
    property VARCHAR NOT NULL,
    value_si DOUBLE NOT NULL,
    u_si DOUBLE,
    unit VARCHAR NOT NULL,
    method VARCHAR NOT NULL,
    method_detail VARCHAR NOT NULL,
    n_candidates INTEGER NOT NULL,
    n_used INTEGER NOT NULL,
    birge_ratio DOUBLE,
    source_ids VARCHAR[] NOT NULL,
    check_status VARCHAR NOT NULL,
    PRIMARY KEY (release_id, value_id)
);
COMMENT ON TABLE release_constant IS 'Recommended value and standard uncertainty of each constant of each fluid in a release (critical and triple points, normal boiling point, acentric factor, enthalpies of phase change at the triple point).';
COMMENT ON COLUMN release_constant.release_id IS 'Release (release.release_id).';
COMMENT ON COLUMN release_constant.value_id IS 'Stable identifier of the value across releases: fluid/point/property, e.g. water/critical:vapour,liquid/Tc; key of release_provenance.';
COMMENT ON COLUMN release_constant.fluid_id IS 'Fluid (fluid.fluid_id).';
COMMENT ON COLUMN release_constant.point IS 'Fixed point the value belongs to (critical:vapour,liquid or triple:<phases>; the vapour triple point for enthalpies at the triple point); empty for other constants.';
COMMENT ON COLUMN release_constant.property IS 'Tc, pc, rhoc (critical); Tt, pt (triple); normal_boiling_T; acentric_factor; h_fusion_triple, h_vaporization_triple, h_sublimation_triple.';
COMMENT ON COLUMN release_constant.value_si IS 'Recommended value in SI, unit in column unit [K, Pa, kg/m^3, J/mol or 1].';
COMMENT ON COLUMN release_constant.u_si IS 'Standard uncertainty (k=1) of value_si, same unit; NULL when no candidate states one.';
COMMENT ON COLUMN release_constant.unit IS 'SI unit of value_si and u_si: K, Pa, kg/m^3, J/mol, or 1 (dimensionless).';
COMMENT ON COLUMN release_constant.method IS 'stated (one source value taken as stated) | derived (computed from a fitted curve) | recommended (combined from several sources by the policy).';
COMMENT ON COLUMN release_constant.method_detail IS 'How the value was obtained, in words (policy step, equation, curve).';
COMMENT ON COLUMN release_constant.n_candidates IS 'Candidate values considered (stated by sources or derived from curves).';
COMMENT ON COLUMN release_constant.n_used IS 'Candidates that entered the recommended value.';
COMMENT ON COLUMN release_constant.birge_ratio IS 'Birge ratio of the candidates combined (NULL for a single candidate); the uncertainty is expanded by it when above 1 and the policy says so.';
COMMENT ON COLUMN release_constant.source_ids IS 'Sources (source.source_id) of the candidates used.';
COMMENT ON COLUMN release_constant.check_status IS 'Worst status of the checks bearing on the value in the check run: fail | error | warn | waived | pass | skip | none.';

CREATE TABLE release_curve (
    release_id VARCHAR NOT NULL,
    value_id VARCHAR NOT NULL,
    curve_id VARCHAR NOT NULL,
    fluid_id VARCHAR NOT NULL,
    boundary VARCHAR NOT NULL,
    solid_phase VARCHAR NOT NULL,
    quantity VARCHAR NOT NULL,
    unit VARCHAR NOT NULL,
    form VARCHAR NOT NULL,
    form_citation VARCHAR NOT NULL,
    link VARCHAR NOT NULL,
    T_ref_K DOUBLE,
    reference_value_si DOUBLE NOT NULL,
    param_names VARCHAR[] NOT NULL,
    params DOUBLE[] NOT NULL,
    exponents DOUBLE[] NOT NULL,
    covariance DOUBLE[][],
    T_min_K DOUBLE NOT NULL,
    T_max_K DOUBLE NOT NULL,
    n_points INTEGER NOT NULL,
    n_used INTEGER NOT NULL,
    n_flagged INTEGER NOT NULL,
    weighted_rms DOUBLE,
    reduced_chi2 DOUBLE,
    input_hash VARCHAR NOT NULL,
    check_status VARCHAR NOT NULL,
    PRIMARY KEY (release_id, value_id)
);
COMMENT ON TABLE release_curve IS 'Fitted phase-boundary curves of a release: correlation form, coefficients, covariance and validity range. The fl_* SQL macros evaluate them.';
COMMENT ON COLUMN release_curve.release_id IS 'Release (release.release_id).';
COMMENT ON COLUMN release_curve.value_id IS 'Stable identifier across releases: fluid/curve:<boundary>[:<solid phase>]/<quantity>; key of release_provenance.';
COMMENT ON COLUMN release_curve.curve_id IS 'Fit the curve comes from (fit.fit_id).';
COMMENT ON COLUMN release_curve.fluid_id IS 'Fluid (fluid.fluid_id).';
COMMENT ON COLUMN release_curve.boundary IS 'liquid-vapour | solid-liquid | solid-vapour | solid-solid.';
COMMENT ON COLUMN release_curve.solid_phase IS 'Solid phase label for polymorphs (e.g. Ih, III); empty for a fluid with one solid and for liquid-vapour curves.';
COMMENT ON COLUMN release_curve.quantity IS 'pressure [Pa] | rho_liquid, rho_vapour [kg/m^3].';
COMMENT ON COLUMN release_curve.unit IS 'SI unit of the curve value: Pa or kg/m^3.';
COMMENT ON COLUMN release_curve.form IS 'Correlation form (registry name in pipeline.correlations), e.g. wagner-3-6.';
COMMENT ON COLUMN release_curve.form_citation IS 'Publication the correlation form comes from.';
COMMENT ON COLUMN release_curve.link IS 'Space the form is fitted in: log (value = exp(...)) or identity.';
COMMENT ON COLUMN release_curve.T_ref_K IS 'Reference temperature of the form (Tc or Tt) [K]; NULL for forms without one (Antoine).';
COMMENT ON COLUMN release_curve.reference_value_si IS 'Reference value implied by the first parameter (pc or pt [Pa], rho_c [kg/m^3]; exp(A) for Antoine).';
COMMENT ON COLUMN release_curve.param_names IS 'Names of the parameters, in order (first: ln_ref or ref).';
COMMENT ON COLUMN release_curve.params IS 'Fitted parameters in the form''s order (SI-based; see the form).';
COMMENT ON COLUMN release_curve.exponents IS 'Fixed exponents t_i of the sum terms (the Riedel exponent F for extended Antoine); empty when the form has none.';
COMMENT ON COLUMN release_curve.covariance IS 'Parameter covariance matrix (list of rows, same order as params); NULL when unknown.';
COMMENT ON COLUMN release_curve.T_min_K IS 'Validity range start [K]: the curve is NULL below it.';
COMMENT ON COLUMN release_curve.T_max_K IS 'Validity range end [K]: the curve is NULL above it.';
COMMENT ON COLUMN release_curve.n_points IS 'Observations in the fitted group.';
COMMENT ON COLUMN release_curve.n_used IS 'Observations used by the fit.';
COMMENT ON COLUMN release_curve.n_flagged IS 'Observations flagged as outliers (kept, not used).';
COMMENT ON COLUMN release_curve.weighted_rms IS 'Weighted RMS of the normalised residuals of the points used.';
COMMENT ON COLUMN release_curve.reduced_chi2 IS 'Reduced chi-square of the fit.';
COMMENT ON COLUMN release_curve.input_hash IS 'Input hash of the fit (fit.input_hash).';
COMMENT ON COLUMN release_curve.check_status IS 'Worst status of the checks bearing on the curve in the check run: fail | error | warn | waived | pass | skip | none.';

CREATE TABLE release_provenance (
    release_id VARCHAR NOT NULL,
    value_id VARCHAR NOT NULL,
    fluid_id VARCHAR NOT NULL,
    value_kind VARCHAR NOT NULL,
    method VARCHAR NOT NULL,
    fit_id VARCHAR,
    was_generated_by VARCHAR NOT NULL,
    was_attributed_to STRUCT(source_id VARCHAR, kind VARCHAR, citation VARCHAR, doi VARCHAR, used BOOLEAN)[] NOT NULL,
    was_derived_from STRUCT(entity VARCHAR, entity_id VARCHAR, source_id VARCHAR, file_sha256 VARCHAR, file_path VARCHAR, row_numbers BIGINT[], obs_ids BIGINT[], value_si DOUBLE, u_si DOUBLE, used BOOLEAN, note VARCHAR)[] NOT NULL,
    checks STRUCT(check_id VARCHAR, subject VARCHAR, status VARCHAR, message VARCHAR)[] NOT NULL,
    decision_ids VARCHAR[] NOT NULL,
    PRIMARY KEY (release_id, value_id)
);
COMMENT ON TABLE release_provenance IS 'One provenance record per released value (constant or curve), in W3C PROV terms: the entities it was derived from (raw rows, fixed-point entries, fits), the activity that generated it, the sources it is attributed to, and the checks bearing on it.';
COMMENT ON COLUMN release_provenance.release_id IS 'Release (release.release_id).';
COMMENT ON COLUMN release_provenance.value_id IS 'The value described (release_constant.value_id or release_curve.value_id).';
COMMENT ON COLUMN release_provenance.fluid_id IS 'Fluid (fluid.fluid_id).';
COMMENT ON COLUMN release_provenance.value_kind IS 'constant | curve.';
COMMENT ON COLUMN release_provenance.method IS 'stated | fitted | derived | recommended.';
COMMENT ON COLUMN release_provenance.fit_id IS 'Fit the value comes from (fit.fit_id) for curves and derived constants; NULL otherwise.';
COMMENT ON COLUMN release_provenance.was_generated_by IS 'prov:wasGeneratedBy - the activity that produced the value (the fit run, or the recommendation step of the publish stage with its policy).';
COMMENT ON COLUMN release_provenance.was_attributed_to IS 'prov:wasAttributedTo - the sources (source.source_id, kind, citation, DOI) of the entities it derives from; used is false for sources whose candidates were left out.';
COMMENT ON COLUMN release_provenance.was_derived_from IS 'prov:wasDerivedFrom - entities: fixed_point (fp_id, batch.toml entry number in row_numbers), stated_constant (const_id, entry number), observations (raw file id, CSV data rows and obs ids), fit (fit_id), value (another released value_id); value_si and u_si of candidates; used and a note on why an entity was left out.';
COMMENT ON COLUMN release_provenance.checks IS 'Findings of the check run bearing on the value (check id, subject, status, message).';
COMMENT ON COLUMN release_provenance.decision_ids IS 'Curation decisions that shaped the value (excluded or preferred sources); empty when none.';

CREATE VIEW curated_release AS
    SELECT r.* EXCLUDE (policy_json, decisions_json), p.published_at, p.publication_seq
    FROM release r
    JOIN (SELECT * FROM release_publication ORDER BY publication_seq DESC LIMIT 1) p USING (release_id);
COMMENT ON VIEW curated_release IS 'The latest published release (one row, none before the first publish).';

CREATE VIEW curated_constants AS
    SELECT c.* FROM release_constant c JOIN curated_release r USING (release_id);
COMMENT ON VIEW curated_constants IS 'Recommended constants of the latest published release: value_si and u_si in the SI unit named in unit; provenance in curated_provenance by value_id.';

CREATE VIEW curated_curves AS
    SELECT c.* FROM release_curve c JOIN curated_release r USING (release_id);
COMMENT ON VIEW curated_curves IS 'Phase-boundary curves of the latest published release; evaluate them with fl_vapour_pressure, fl_saturation_temperature, fl_melting_pressure, fl_sublimation_pressure, fl_saturated_liquid_density, fl_saturated_vapour_density or fl_curve_value.';

CREATE VIEW curated_provenance AS
    SELECT p.* FROM release_provenance p JOIN curated_release r USING (release_id);
COMMENT ON VIEW curated_provenance IS 'Provenance records of the latest published release, one per value_id.';
