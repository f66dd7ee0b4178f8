-- A session store at schema version 2, as reconcile wrote it (SQLite 3.40, Python 3.11
-- sqlite3 iterdump; the session id was then set to S-FIXTURE3).
-- Source: tests/store_support.BOARD_TOML; one import of a two-row readings file
-- (bench.csv: vcc 8.98 V, b 1.5 V) recorded with its SHA-256 and both rows.
-- Used by test_store_imports.py to check that a version-2 store keeps opening and that
-- its import is still recognised. Never edit: add a new file for a new schema version.
BEGIN TRANSACTION;
CREATE TABLE analyses (
	id INTEGER NOT NULL PRIMARY KEY AUTOINCREMENT, 
	session_id VARCHAR(16) NOT NULL, 
	kind TEXT NOT NULL, 
	result TEXT NOT NULL, 
	tool_version TEXT NOT NULL, 
	inputs_sha256 VARCHAR(64) NOT NULL, 
	created TEXT NOT NULL, 
	FOREIGN KEY(session_id) REFERENCES sessions (id)
);
CREATE TABLE boards (
	id INTEGER NOT NULL PRIMARY KEY AUTOINCREMENT, 
	sha256 VARCHAR(64) NOT NULL, 
	title TEXT NOT NULL, 
	source_text TEXT NOT NULL, 
	created TEXT NOT NULL, 
	UNIQUE (sha256)
);
INSERT INTO "boards" VALUES(1,'f0d231a7885fae16fef60d1e4b3839f1e08b41c23812749ad0ba1f198ff97fd0','Store test stage (invented)','title = "Store test stage (invented)"

[supplies.VCC]
node = "vcc"
volts = "9"
[resistors.R1]
nodes = ["vcc", "b"]
ohms = "47k"
[resistors.R2]
nodes = ["b", "gnd"]
ohms = "10k"
[resistors.RC]
nodes = ["vcc", "c"]
ohms = "4k7"
[resistors.RE]
nodes = ["e", "gnd"]
ohms = "1k"
[transistors.Q1]
polarity = "npn"
c = "c"
b = "b"
e = "e"
device = "test-npn"
[devices.test-npn]
IS = "5f"
beta = { value = 150, low = 60, high = 400 }
','2026-12-02T17:19:29.590Z');
CREATE TABLE import_rows (
	import_id INTEGER NOT NULL, 
	position INTEGER NOT NULL, 
	reading_id INTEGER NOT NULL, 
	PRIMARY KEY (import_id, position), 
	FOREIGN KEY(import_id) REFERENCES imports (id), 
	UNIQUE (reading_id), 
	FOREIGN KEY(reading_id) REFERENCES readings (id)
);
INSERT INTO "import_rows" VALUES(1,0,1);
INSERT INTO "import_rows" VALUES(1,1,2);
CREATE TABLE imports (
	id INTEGER NOT NULL PRIMARY KEY AUTOINCREMENT, 
	session_id VARCHAR(16) NOT NULL, 
	file_sha256 VARCHAR(64) NOT NULL, 
	source TEXT NOT NULL, 
	n_rows INTEGER NOT NULL, 
	again INTEGER NOT NULL, 
	started TEXT NOT NULL, 
	tool_version TEXT NOT NULL, 
	FOREIGN KEY(session_id) REFERENCES sessions (id)
);
INSERT INTO "imports" VALUES(1,'S-FIXTURE3','514484937f485ea2ced3e9b4cae4d79c80e3ec7e0e01bddefe69cdc97a60388a','bench.csv',2,0,'2026-12-02T17:19:29.595Z','0.1.0');
CREATE TABLE readings (
	id INTEGER NOT NULL PRIMARY KEY AUTOINCREMENT, 
	session_id VARCHAR(16) NOT NULL, 
	kind TEXT NOT NULL, 
	quantity TEXT NOT NULL, 
	at TEXT NOT NULL, 
	value FLOAT, 
	unit TEXT NOT NULL, 
	uncertainty FLOAT, 
	instrument TEXT NOT NULL, 
	note TEXT NOT NULL, 
	device TEXT NOT NULL, 
	raw TEXT NOT NULL, 
	source TEXT NOT NULL, 
	source_line INTEGER, 
	taken_at TEXT NOT NULL, 
	stored TEXT NOT NULL, 
	supersedes INTEGER, 
	CONSTRAINT ck_readings_kind CHECK ((kind = 'reading' AND value IS NOT NULL) OR kind = 'retraction'), 
	FOREIGN KEY(session_id) REFERENCES sessions (id), 
	UNIQUE (supersedes), 
	FOREIGN KEY(supersedes) REFERENCES readings (id)
);
INSERT INTO "readings" VALUES(1,'S-FIXTURE3','reading','voltage','vcc',8.98,'V',NULL,'','','','["voltage", "vcc", "8.98", "V", "", "", "", ""]','bench.csv',2,'2026-12-02T17:19:29.596Z','2026-12-02T17:19:29.596Z',NULL);
INSERT INTO "readings" VALUES(2,'S-FIXTURE3','reading','voltage','b',1.5,'V',0.002,'DMM-1','','','["voltage", "b", "1.5", "V", "2m", "DMM-1", "", ""]','bench.csv',3,'2026-12-02T17:19:29.598Z','2026-12-02T17:19:29.598Z',NULL);
CREATE TABLE schema_version (
	version INTEGER NOT NULL, 
	applied TEXT NOT NULL, 
	tool_version TEXT NOT NULL, 
	PRIMARY KEY (version)
);
INSERT INTO "schema_version" VALUES(1,'2026-12-02T17:19:29.579Z','0.1.0');
INSERT INTO "schema_version" VALUES(2,'2026-12-02T17:19:29.586Z','0.1.0');
CREATE TABLE session_events (
	id INTEGER NOT NULL PRIMARY KEY AUTOINCREMENT, 
	session_id VARCHAR(16) NOT NULL, 
	kind TEXT NOT NULL, 
	at TEXT NOT NULL, 
	note TEXT NOT NULL, 
	FOREIGN KEY(session_id) REFERENCES sessions (id)
);
CREATE TABLE sessions (
	id VARCHAR(16) NOT NULL, 
	board_id INTEGER NOT NULL, 
	board_path TEXT NOT NULL, 
	serial TEXT NOT NULL, 
	operator TEXT NOT NULL, 
	notes TEXT NOT NULL, 
	started TEXT NOT NULL, 
	tool_version TEXT NOT NULL, 
	PRIMARY KEY (id), 
	FOREIGN KEY(board_id) REFERENCES boards (id)
);
INSERT INTO "sessions" VALUES('S-FIXTURE3',1,'board.toml','U-0002','tester','','2026-12-02T17:19:29.590Z','0.1.0');
CREATE INDEX ix_session_events_session ON session_events (session_id);
CREATE INDEX ix_readings_session ON readings (session_id, id);
CREATE INDEX ix_analyses_session ON analyses (session_id);
CREATE TRIGGER boards_no_update BEFORE UPDATE ON boards BEGIN SELECT RAISE(ABORT, 'boards are append-only'); END;
CREATE TRIGGER boards_no_delete BEFORE DELETE ON boards BEGIN SELECT RAISE(ABORT, 'boards are append-only'); END;
CREATE TRIGGER sessions_no_update BEFORE UPDATE ON sessions BEGIN SELECT RAISE(ABORT, 'sessions are append-only'); END;
CREATE TRIGGER sessions_no_delete BEFORE DELETE ON sessions BEGIN SELECT RAISE(ABORT, 'sessions are append-only'); END;
CREATE TRIGGER session_events_no_update BEFORE UPDATE ON session_events BEGIN SELECT RAISE(ABORT, 'session_events are append-only'); END;
CREATE TRIGGER session_events_no_delete BEFORE DELETE ON session_events BEGIN SELECT RAISE(ABORT, 'session_events are append-only'); END;
CREATE TRIGGER readings_no_update BEFORE UPDATE ON readings BEGIN SELECT RAISE(ABORT, 'readings are append-only'); END;
CREATE TRIGGER readings_no_delete BEFORE DELETE ON readings BEGIN SELECT RAISE(ABORT, 'readings are append-only'); END;
CREATE TRIGGER analyses_no_update BEFORE UPDATE ON analyses BEGIN SELECT RAISE(ABORT, 'analyses are append-only'); END;
CREATE TRIGGER analyses_no_delete BEFORE DELETE ON analyses BEGIN SELECT RAISE(ABORT, 'analyses are append-only'); END;
CREATE INDEX ix_imports_session_sha ON imports (session_id, file_sha256);
CREATE TRIGGER imports_no_update BEFORE UPDATE ON imports BEGIN SELECT RAISE(ABORT, 'imports are append-only'); END;
CREATE TRIGGER imports_no_delete BEFORE DELETE ON imports BEGIN SELECT RAISE(ABORT, 'imports are append-only'); END;
CREATE TRIGGER import_rows_no_update BEFORE UPDATE ON import_rows BEGIN SELECT RAISE(ABORT, 'import_rows are append-only'); END;
CREATE TRIGGER import_rows_no_delete BEFORE DELETE ON import_rows BEGIN SELECT RAISE(ABORT, 'import_rows are append-only'); END;
DELETE FROM "sqlite_sequence";
INSERT INTO "sqlite_sequence" VALUES('boards',1);
INSERT INTO "sqlite_sequence" VALUES('imports',1);
INSERT INTO "sqlite_sequence" VALUES('readings',2);
COMMIT;
