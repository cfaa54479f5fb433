-- foldsweep tracker, schema version 2 (generated from sweep/store.py)

CREATE TABLE configurations (
	config_id VARCHAR(32) NOT NULL, 
	worker VARCHAR(200) NOT NULL, 
	label VARCHAR(200) NOT NULL, 
	params TEXT NOT NULL, 
	PRIMARY KEY (config_id)
);

CREATE TABLE datasets (
	fingerprint VARCHAR(32) NOT NULL, 
	name VARCHAR(200) NOT NULL, 
	source TEXT NOT NULL, 
	n_samples INTEGER NOT NULL, 
	n_features INTEGER NOT NULL, 
	class_counts TEXT NOT NULL, 
	PRIMARY KEY (fingerprint)
);

CREATE TABLE folds (
	scheme VARCHAR(64) NOT NULL, 
	fingerprint VARCHAR(32) NOT NULL, 
	repeat INTEGER NOT NULL, 
	fold INTEGER NOT NULL, 
	test_index BLOB NOT NULL, 
	n_test INTEGER NOT NULL, 
	missing_classes TEXT NOT NULL, 
	PRIMARY KEY (scheme, fingerprint, repeat, fold)
);

CREATE TABLE jobs (
	"key" VARCHAR(40) NOT NULL, 
	sweep VARCHAR(200) NOT NULL, 
	dataset VARCHAR(200) NOT NULL, 
	fingerprint VARCHAR(32) NOT NULL, 
	config_id VARCHAR(32) NOT NULL, 
	scheme VARCHAR(64) NOT NULL, 
	repeat INTEGER NOT NULL, 
	fold INTEGER NOT NULL, 
	state VARCHAR(10) NOT NULL, 
	attempts INTEGER NOT NULL, 
	owner VARCHAR(200), 
	lease_expires FLOAT, 
	queued_at FLOAT NOT NULL, 
	started_at FLOAT, 
	finished_at FLOAT, 
	timed_out BOOLEAN NOT NULL, 
	error TEXT, 
	PRIMARY KEY ("key")
);

CREATE INDEX jobs_by_state ON jobs (state);

CREATE TABLE meta (
	name VARCHAR(64) NOT NULL, 
	value TEXT NOT NULL, 
	PRIMARY KEY (name)
);

CREATE TABLE sweeps (
	name VARCHAR(200) NOT NULL, 
	spec_path TEXT NOT NULL, 
	spec_digest VARCHAR(64) NOT NULL, 
	first_run FLOAT NOT NULL, 
	last_run FLOAT NOT NULL, 
	PRIMARY KEY (name)
);

CREATE TABLE results (
	"key" VARCHAR(40) NOT NULL, 
	dataset VARCHAR(200) NOT NULL, 
	fingerprint VARCHAR(32) NOT NULL, 
	scheme VARCHAR(64) NOT NULL, 
	config_id VARCHAR(32) NOT NULL, 
	repeat INTEGER NOT NULL, 
	fold INTEGER NOT NULL, 
	accuracy FLOAT NOT NULL, 
	balanced_accuracy FLOAT NOT NULL, 
	kappa FLOAT NOT NULL, 
	train_accuracy FLOAT NOT NULL, 
	fit_seconds FLOAT NOT NULL, 
	predict_seconds FLOAT NOT NULL, 
	figures TEXT NOT NULL, 
	model_text TEXT, 
	worker_version VARCHAR(64) NOT NULL, 
	host VARCHAR(200) NOT NULL, 
	finished_at FLOAT NOT NULL, 
	PRIMARY KEY ("key"), 
	FOREIGN KEY("key") REFERENCES jobs ("key")
);

CREATE TABLE sweep_jobs (
	sweep VARCHAR(200) NOT NULL, 
	"key" VARCHAR(40) NOT NULL, 
	dataset VARCHAR(200) NOT NULL, 
	active BOOLEAN NOT NULL, 
	PRIMARY KEY (sweep, "key"), 
	FOREIGN KEY("key") REFERENCES jobs ("key")
);
