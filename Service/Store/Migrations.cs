namespace Bitbudget.Service.Store;

/// <summary>The schema, one numbered step at a time; a released step is never edited, only followed by a new one.</summary>
internal static class Migrations
{
    public static IReadOnlyList<(int Version, string Sql)> All { get; } =
    [
        (1, """
            CREATE TABLE models (
                id TEXT PRIMARY KEY,
                sha256 TEXT NOT NULL UNIQUE,
                name TEXT NOT NULL,
                bytes INTEGER NOT NULL,
                summary_json TEXT NOT NULL,
                created_at TEXT NOT NULL);
            CREATE TABLE datasets (
                id TEXT PRIMARY KEY,
                sha256 TEXT NOT NULL UNIQUE,
                bytes INTEGER NOT NULL,
                summary_json TEXT NOT NULL,
                created_at TEXT NOT NULL);
            CREATE TABLE searches (
                id TEXT PRIMARY KEY,
                model_id TEXT NOT NULL REFERENCES models(id),
                dataset_id TEXT NOT NULL REFERENCES datasets(id),
                settings_json TEXT NOT NULL,
                state TEXT NOT NULL,
                stage TEXT,
                progress_done INTEGER NOT NULL DEFAULT 0,
                progress_total INTEGER NOT NULL DEFAULT 0,
                eta_seconds REAL,
                error_code TEXT,
                error_message TEXT,
                job_id TEXT,
                attempts INTEGER NOT NULL DEFAULT 0,
                lease_owner TEXT,
                lease_until TEXT,
                idempotency_key TEXT UNIQUE,
                request_hash TEXT NOT NULL,
                created_at TEXT NOT NULL,
                started_at TEXT,
                finished_at TEXT);
            CREATE INDEX searches_model ON searches(model_id, created_at);
            CREATE INDEX searches_state ON searches(state);
            CREATE TABLE trials (
                search_id TEXT NOT NULL REFERENCES searches(id),
                key TEXT NOT NULL,
                kind TEXT NOT NULL,
                layer TEXT,
                bits INTEGER,
                assignment_hash TEXT,
                metrics_json TEXT NOT NULL,
                duration_ms REAL NOT NULL,
                created_at TEXT NOT NULL,
                UNIQUE(search_id, key));
            CREATE TABLE results (
                search_id TEXT PRIMARY KEY REFERENCES searches(id),
                feasible INTEGER NOT NULL,
                message TEXT NOT NULL,
                manifest_sha256 TEXT NOT NULL,
                model_sha256 TEXT,
                sensitivity_sha256 TEXT NOT NULL,
                frontier_sha256 TEXT NOT NULL,
                bytes INTEGER NOT NULL,
                average_bits REAL NOT NULL,
                compression REAL NOT NULL,
                predicted REAL NOT NULL,
                measured REAL NOT NULL,
                trial_count INTEGER NOT NULL,
                created_at TEXT NOT NULL);
            """),
        (2, """
            ALTER TABLE results ADD COLUMN warnings_json TEXT;
            """),
        (3, """
            ALTER TABLE results ADD COLUMN held_out_samples INTEGER;
            ALTER TABLE results ADD COLUMN held_out_measured REAL;
            ALTER TABLE results ADD COLUMN held_out_meets INTEGER;
            """),
        (4, """
            ALTER TABLE results ADD COLUMN model_file_bytes INTEGER;
            ALTER TABLE results ADD COLUMN storage TEXT NOT NULL DEFAULT 'container';
            ALTER TABLE results ADD COLUMN storage_note TEXT;
            """),
    ];
}
