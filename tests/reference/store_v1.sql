-- A session store at schema version 1, as reconcile 0.1.0 wrote it (SQLite 3.40,
-- Python 3.11 sqlite3 iterdump; the session id was then set to S-FIXTURE2).
-- Source: tests/store_support.BOARD_TOML; readings vcc 8.98 V, b 1.5 V (corrected to
-- 1.52 V), c 5.1 V (retracted); one fit analysis; the session ended.
-- Used by test_store.py to check that a version-1 store keeps opening; it is compared
-- exactly (values, cells and order), no tolerance. Never edit: add a new file for a new
-- schema version.
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
INSERT INTO "analyses" VALUES(1,'S-FIXTURE2','fit','{"chi_square": 1.25, "dof": 1}','0.1.0','a32df227a6bcef6522fa8368b357bd71d12e219dada12afc720efe113d38b08b','2026-12-02T01:00:09.402Z');
CREATE TABLE boards (
	id INTEGER NOT NULL PRIMARY KEY AUTOINCREMENT, 
	sha256 VARCHAR(64) NOT NULL, 
	title TEXT NOT NULL, 
	source_text TEXT NOT NULL, 
	created TEXT NOT NULL, 
	UNIQUE (sha256)
);
INSERT INTO "boards" VALUES(1,'0bd285f26f17d1c7d3657b9dc6540a9be983100ca771f8ffb88fb258c7bae7bd','Store test stage (invented)','title = "Store test stage (invented)"

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
','2026-12-02T01:00:09.388Z');
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
INSERT INTO "readings" VALUES(1,'S-FIXTURE2','reading','voltage','vcc',8.98,'V',NULL,'','','','["voltage", "vcc", "8.98", "V", "", "", "", ""]','readings.csv',2,'2026-12-02T01:00:09.389Z','2026-12-02T01:00:09.389Z',NULL);
INSERT INTO "readings" VALUES(2,'S-FIXTURE2','reading','voltage','b',1.5,'V',0.002,'DMM-1','','','["voltage", "b", "1.5", "V", "2m", "DMM-1", "", ""]','readings.csv',3,'2026-12-02T01:00:09.393Z','2026-12-02T01:00:09.393Z',NULL);
INSERT INTO "readings" VALUES(3,'S-FIXTURE2','reading','voltage','c',5.1,'V',NULL,'','','','["voltage", "c", "5.1", "V", "", "", "", ""]','readings.csv',4,'2026-12-02T01:00:09.394Z','2026-12-02T01:00:09.394Z',NULL);
INSERT INTO "readings" VALUES(4,'S-FIXTURE2','reading','voltage','b',1.52,'V',0.002,'DMM-1','corrected','','["voltage", "b", "1.52", "V", "2m", "DMM-1", "corrected", ""]','correction',2,'2026-12-02T01:00:09.394Z','2026-12-02T01:00:09.394Z',2);
INSERT INTO "readings" VALUES(5,'S-FIXTURE2','retraction','','',NULL,'',NULL,'','wrong node','','[]','retraction',NULL,'2026-12-02T01:00:09.396Z','2026-12-02T01:00:09.396Z',3);
CREATE TABLE schema_version (
	version INTEGER NOT NULL, 
	applied TEXT NOT NULL, 
	tool_version TEXT NOT NULL, 
	PRIMARY KEY (version)
);
INSERT INTO "schema_version" VALUES(1,'2026-12-02T01:00:09.384Z','0.1.0');
CREATE TABLE session_events (
	id INTEGER NOT NULL PRIMARY KEY AUTOINCREMENT, 
	session_id VARCHAR(16) NOT NULL, 
	kind TEXT NOT NULL, 
	at TEXT NOT NULL, 
	note TEXT NOT NULL, 
	FOREIGN KEY(session_id) REFERENCES sessions (id)
);
INSERT INTO "session_events" VALUES(1,'S-FIXTURE2','ended','2026-12-02T01:00:09.404Z','');
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
INSERT INTO "sessions" VALUES('S-FIXTURE2',1,'board.toml','FX-1','fixture','schema v1 fixture','2026-12-02T01:00:09.388Z','0.1.0');
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
DELETE FROM "sqlite_sequence";
INSERT INTO "sqlite_sequence" VALUES('boards',1);
INSERT INTO "sqlite_sequence" VALUES('readings',5);
INSERT INTO "sqlite_sequence" VALUES('analyses',1);
INSERT INTO "sqlite_sequence" VALUES('session_events',1);
COMMIT;
