-- 002: fitted correlations and per-observation residuals.
CREATE TABLE fit (
    fit_id VARCHAR PRIMARY KEY,
    fluid_id VARCHAR NOT NULL,
    boundary VARCHAR NOT NULL,
    solid_phase VARCHAR NOT NULL,
    quantity VARCHAR NOT NULL,
    status VARCHAR NOT NULL,
    skipped_reason VARCHAR,
    form VARCHAR,
    curve_json VARCHAR,
    params_json VARCHAR,
    covariance_json VARCHAR,
    T_min_K DOUBLE,
    T_max_K DOUBLE,
    n_points INTEGER NOT NULL,
    n_used INTEGER NOT NULL,
    n_flagged INTEGER NOT NULL,
    n_excluded INTEGER NOT NULL,
    weighted_rms DOUBLE,
    reduced_chi2 DOUBLE,
    bic DOUBLE,
    input_hash VARCHAR NOT NULL,
    fit_run_id VARCHAR NOT NULL,
    fitted_at TIMESTAMP NOT NULL,
    is_current BOOLEAN NOT NULL
);
COMMENT ON TABLE fit IS 'A correlation fitted to one (fluid, boundary, solid phase, quantity) group, or the stated reason it was skipped. Earlier fits stay with is_current = false.';
COMMENT ON COLUMN fit.fit_id IS 'Fit identifier: the group and the first 12 hex digits of its input hash.';
COMMENT ON COLUMN fit.fluid_id IS 'Fluid (fluid.fluid_id).';
COMMENT ON COLUMN fit.boundary IS 'liquid-vapour | solid-liquid | solid-vapour | solid-solid.';
COMMENT ON COLUMN fit.solid_phase IS 'Solid phase label for polymorphs, empty otherwise.';
COMMENT ON COLUMN fit.quantity IS 'Fitted quantity: pressure [Pa], rho_liquid or rho_vapour [kg/m^3].';
COMMENT ON COLUMN fit.status IS 'fitted | skipped.';
COMMENT ON COLUMN fit.skipped_reason IS 'Why no fit was made (too few points, no reference point...).';
COMMENT ON COLUMN fit.form IS 'Correlation form chosen (registry name), e.g. wagner-2.5-5.';
COMMENT ON COLUMN fit.curve_json IS 'The full curve (form, params, reference constants, covariance, range) as JSON; evaluates with pipeline.correlations.Curve.from_dict.';
COMMENT ON COLUMN fit.params_json IS 'Fitted parameters, JSON array (SI-based, see the form).';
COMMENT ON COLUMN fit.covariance_json IS 'Parameter covariance matrix, JSON array of arrays.';
COMMENT ON COLUMN fit.T_min_K IS 'Lowest temperature of the data used [K] (validity range start).';
COMMENT ON COLUMN fit.T_max_K IS 'Highest temperature of the data used [K] (validity range end).';
COMMENT ON COLUMN fit.n_points IS 'Observations in the group.';
COMMENT ON COLUMN fit.n_used IS 'Observations used in the final fit.';
COMMENT ON COLUMN fit.n_flagged IS 'Observations flagged as outliers (kept, not used).';
COMMENT ON COLUMN fit.n_excluded IS 'Observations excluded by a curation decision.';
COMMENT ON COLUMN fit.weighted_rms IS 'Weighted RMS of normalised residuals of the points used.';
COMMENT ON COLUMN fit.reduced_chi2 IS 'Reduced chi-square of the final fit.';
COMMENT ON COLUMN fit.bic IS 'Bayesian information criterion of the chosen form.';
COMMENT ON COLUMN fit.input_hash IS 'SHA-256 of the sort-keyed JSON of the inputs (observations, reference point, settings).';
COMMENT ON COLUMN fit.fit_run_id IS 'Fit run that made the row.';
COMMENT ON COLUMN fit.fitted_at IS 'UTC time of the fit.';
COMMENT ON COLUMN fit.is_current IS 'True for the fit in force for the group.';

CREATE TABLE fit_residual (
    fit_id VARCHAR NOT NULL,
    obs_id BIGINT NOT NULL,
    residual_si DOUBLE,
    z DOUBLE,
    is_outlier BOOLEAN NOT NULL,
    excluded_by VARCHAR,
    PRIMARY KEY (fit_id, obs_id)
);
COMMENT ON TABLE fit_residual IS 'Residual of every observation of a fitted group against the fit.';
COMMENT ON COLUMN fit_residual.fit_id IS 'Fit (fit.fit_id).';
COMMENT ON COLUMN fit_residual.obs_id IS 'Observation (observation.obs_id).';
COMMENT ON COLUMN fit_residual.residual_si IS 'Observed minus fitted value [SI unit of the quantity].';
COMMENT ON COLUMN fit_residual.z IS 'Normalised residual: residual over the combined standard uncertainty.';
COMMENT ON COLUMN fit_residual.is_outlier IS 'True when |z| exceeded the outlier limit; the point is kept but not used.';
COMMENT ON COLUMN fit_residual.excluded_by IS 'Curation decision id that excluded the point, NULL otherwise.';
