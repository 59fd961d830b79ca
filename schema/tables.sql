-- nfb database schema, version 4, postgresql dialect.
-- GENERATED from builder/storage/models.py by `python -m builder.storage.models`;
-- do not edit by hand (tests/test_schema.py checks that it is in sync).
-- Column meanings: schema/README.md.

CREATE TABLE meta (
	key VARCHAR(64) NOT NULL,
	value TEXT NOT NULL,
	PRIMARY KEY (key)
);

CREATE TABLE runs (
	id SERIAL NOT NULL,
	code_version VARCHAR(100) NOT NULL,
	params JSON NOT NULL,
	job JSON NOT NULL,
	host VARCHAR(255) NOT NULL,
	pid INTEGER NOT NULL,
	started_at TIMESTAMP WITH TIME ZONE NOT NULL,
	finished_at TIMESTAMP WITH TIME ZONE,
	status VARCHAR(16) NOT NULL,
	units_planned INTEGER NOT NULL,
	units_done INTEGER NOT NULL,
	message TEXT,
	PRIMARY KEY (id)
);

CREATE TABLE spaces (
	level INTEGER NOT NULL,
	weight INTEGER NOT NULL,
	char_index INTEGER NOT NULL,
	char_order INTEGER NOT NULL,
	char_conductor INTEGER NOT NULL,
	char_parity INTEGER NOT NULL,
	char_number INTEGER NOT NULL,
	char_degree INTEGER NOT NULL,
	status VARCHAR(16) NOT NULL,
	dim_cusp INTEGER,
	dim_new INTEGER,
	dim_old INTEGER,
	dim_eis INTEGER,
	num_orbits INTEGER,
	sturm_bound INTEGER,
	seconds FLOAT NOT NULL,
	content_hash VARCHAR(64),
	params JSON NOT NULL,
	trace_bound INTEGER NOT NULL,
	ap_bound INTEGER NOT NULL,
	dim_cap INTEGER NOT NULL,
	record_version INTEGER,
	run_id INTEGER,
	error TEXT,
	PRIMARY KEY (level, weight, char_index),
	FOREIGN KEY(run_id) REFERENCES runs (id)
);

CREATE INDEX ix_spaces_char_order ON spaces (char_order);

CREATE INDEX ix_spaces_dim_new ON spaces (dim_new);

CREATE INDEX ix_spaces_status ON spaces (status);

CREATE INDEX ix_spaces_weight_level ON spaces (weight, level);

CREATE TABLE newforms (
	label VARCHAR(64) NOT NULL,
	level INTEGER NOT NULL,
	weight INTEGER NOT NULL,
	char_index INTEGER NOT NULL,
	char_order INTEGER NOT NULL,
	orbit INTEGER NOT NULL,
	dim INTEGER NOT NULL,
	rel_dim INTEGER NOT NULL,
	field_poly JSON NOT NULL,
	field_disc TEXT,
	traces JSON NOT NULL,
	al_primes JSON NOT NULL,
	al_signs JSON NOT NULL,
	al_pattern VARCHAR(255) NOT NULL,
	fricke_sign INTEGER,
	root_number INTEGER,
	is_cm BOOLEAN NOT NULL,
	cm_disc BIGINT,
	lvalue_zero BOOLEAN,
	l_ratio TEXT,
	hecke_poly_2 JSON,
	has_ap BOOLEAN NOT NULL,
	al_pseudo_primes JSON NOT NULL,
	al_pseudo_values JSON,
	PRIMARY KEY (label),
	FOREIGN KEY(level, weight, char_index) REFERENCES spaces (level, weight, char_index) ON DELETE CASCADE,
	CONSTRAINT uq_newforms_unit_orbit UNIQUE (level, weight, char_index, orbit)
);

CREATE INDEX ix_newforms_al_pattern ON newforms (al_pattern);

CREATE INDEX ix_newforms_char_order ON newforms (char_order);

CREATE INDEX ix_newforms_dim ON newforms (dim);

CREATE INDEX ix_newforms_fricke_sign ON newforms (fricke_sign);

CREATE INDEX ix_newforms_is_cm ON newforms (is_cm);

CREATE INDEX ix_newforms_level_weight ON newforms (level, weight);

CREATE INDEX ix_newforms_root_number ON newforms (root_number);

CREATE INDEX ix_newforms_weight_level ON newforms (weight, level);

CREATE TABLE eigenvalues (
	label VARCHAR(64) NOT NULL,
	p INTEGER NOT NULL,
	coords JSON NOT NULL,
	PRIMARY KEY (label, p),
	FOREIGN KEY(label) REFERENCES newforms (label) ON DELETE CASCADE
);

CREATE INDEX ix_eigenvalues_p ON eigenvalues (p);
