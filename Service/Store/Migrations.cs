namespace Bitbudget.Service.Store;

/// <summary>
/// The schema, one numbered step at a time; a released step is never edited, only followed by a new one. Each
/// step is written for SQLite and, where PostgreSQL needs other text, for PostgreSQL too (<see cref="PostgresSchema"/>);
/// the store tests run every step on both.
/// </summary>
internal static class Migrations
{
    public static IReadOnlyList<Migration> All { get; } =
    [
        new(1, """
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
            """,
            Postgres: PostgresSchema.Step1),
        // Results of an infeasible search have no assignment, so its size and errors are NULL (SQLite cannot
        // hold NaN); results also carry warnings, held-out figures and the written file's size. Failures count
        // failed runs, not restarts. Counters kept by triggers in the writing transaction let /metrics read a
        // few rows instead of scanning the trials table.
        new(2, """
            CREATE TABLE results_v2 (
                search_id TEXT PRIMARY KEY REFERENCES searches(id),
                feasible INTEGER NOT NULL,
                message TEXT NOT NULL,
                manifest_sha256 TEXT NOT NULL,
                model_sha256 TEXT,
                sensitivity_sha256 TEXT NOT NULL,
                frontier_sha256 TEXT NOT NULL,
                bytes INTEGER,
                average_bits REAL,
                compression REAL,
                predicted REAL,
                measured REAL,
                trial_count INTEGER NOT NULL,
                created_at TEXT NOT NULL,
                warnings_json TEXT,
                held_out_samples INTEGER,
                held_out_measured REAL,
                held_out_meets INTEGER,
                model_file_bytes INTEGER,
                storage TEXT NOT NULL DEFAULT 'container',
                storage_note TEXT);
            INSERT INTO results_v2 (search_id, feasible, message, manifest_sha256, model_sha256, sensitivity_sha256,
                frontier_sha256, bytes, average_bits, compression, predicted, measured, trial_count, created_at)
                SELECT search_id, feasible, message, manifest_sha256, model_sha256, sensitivity_sha256,
                frontier_sha256, bytes, average_bits, compression, predicted, measured, trial_count, created_at FROM results;
            DROP TABLE results;
            ALTER TABLE results_v2 RENAME TO results;

            ALTER TABLE searches ADD COLUMN failures INTEGER NOT NULL DEFAULT 0;

            CREATE TABLE search_counts (state TEXT PRIMARY KEY, count INTEGER NOT NULL);
            INSERT INTO search_counts (state, count) SELECT state, COUNT(*) FROM searches GROUP BY state;
            CREATE TRIGGER search_counted AFTER INSERT ON searches BEGIN
                INSERT INTO search_counts (state, count) VALUES (NEW.state, 1)
                    ON CONFLICT(state) DO UPDATE SET count = count + 1;
            END;
            CREATE TRIGGER search_recounted AFTER UPDATE OF state ON searches WHEN OLD.state <> NEW.state BEGIN
                UPDATE search_counts SET count = count - 1 WHERE state = OLD.state;
                INSERT INTO search_counts (state, count) VALUES (NEW.state, 1)
                    ON CONFLICT(state) DO UPDATE SET count = count + 1;
            END;
            CREATE TRIGGER search_uncounted AFTER DELETE ON searches BEGIN
                UPDATE search_counts SET count = count - 1 WHERE state = OLD.state;
            END;

            -- Bucket i holds trials with duration in (upper_ms of bucket i-1, upper_ms of bucket i]; the last
            -- bucket has no upper bound. The bounds live only here, so seeding and the trigger cannot disagree.
            CREATE TABLE trial_buckets (bucket INTEGER PRIMARY KEY, upper_ms REAL, count INTEGER NOT NULL, sum_ms REAL NOT NULL);
            INSERT INTO trial_buckets (bucket, upper_ms, count, sum_ms) VALUES
                (0, 10, 0, 0), (1, 25, 0, 0), (2, 50, 0, 0), (3, 100, 0, 0), (4, 250, 0, 0), (5, 500, 0, 0),
                (6, 1000, 0, 0), (7, 2500, 0, 0), (8, 5000, 0, 0), (9, 10000, 0, 0), (10, 30000, 0, 0), (11, NULL, 0, 0);
            CREATE TRIGGER trial_counted AFTER INSERT ON trials BEGIN
                UPDATE trial_buckets SET count = count + 1, sum_ms = sum_ms + NEW.duration_ms
                WHERE bucket = (SELECT MIN(bucket) FROM trial_buckets WHERE upper_ms IS NULL OR NEW.duration_ms <= upper_ms);
            END;
            WITH placed (bucket, duration_ms) AS (
                SELECT (SELECT MIN(b.bucket) FROM trial_buckets b WHERE b.upper_ms IS NULL OR t.duration_ms <= b.upper_ms), t.duration_ms
                FROM trials t)
            UPDATE trial_buckets SET
                count = (SELECT COUNT(*) FROM placed p WHERE p.bucket = trial_buckets.bucket),
                sum_ms = (SELECT COALESCE(SUM(p.duration_ms), 0) FROM placed p WHERE p.bucket = trial_buckets.bucket);

            CREATE TABLE store_probe (id INTEGER PRIMARY KEY CHECK (id = 1), written_at TEXT NOT NULL);
            """,
            Postgres: PostgresSchema.Step2),
        // One vocabulary (manifest format 4): a search's settings say "clip" where they said "calibration", and
        // sensitivity trial keys spell granularity and clip as the API does ("4b-symmetric-per-channel-min-max",
        // was "4b-symmetric-perchannel-minmax"), so a stored search resumed by this version finds its trials.
        // Each replace is anchored on the scheme that precedes the granularity in a key. Validation keys hash
        // a text that did not change (TrialKeys.AssignmentHash) and need nothing.
        new(3, ClipSetting + TrialKeyRenames, Postgres: PostgresSchema.Step3ClipSetting + TrialKeyRenames),
        // A search spread over several workers: its sweep in parts (groups of whole layers), each taken by one
        // worker at a time under a lease; parts_left counts down as parts finish, so exactly one worker (the last)
        // queues the search's final stage. Trials say which worker measured them.
        new(4, """
            CREATE TABLE sweep_parts (
                search_id TEXT NOT NULL REFERENCES searches(id),
                part INTEGER NOT NULL,
                layers_json TEXT NOT NULL,
                trials INTEGER NOT NULL,
                state TEXT NOT NULL DEFAULT 'pending',
                job_id TEXT,
                lease_owner TEXT,
                lease_until TEXT,
                attempts INTEGER NOT NULL DEFAULT 0,
                finished_by TEXT,
                finished_at TEXT,
                PRIMARY KEY (search_id, part));
            ALTER TABLE searches ADD COLUMN parts_left INTEGER;
            ALTER TABLE trials ADD COLUMN measured_by TEXT;
            """),
        // Every trial keeps what it measured (layer -> setting, and the activation quantization), so it can be run
        // again from the store alone; trials stored before have NULL here. The same text on both databases.
        new(5, """
            ALTER TABLE trials ADD COLUMN assignment_json TEXT;
            ALTER TABLE trials ADD COLUMN activations TEXT;
            """),
        // A search that reuses the sweep of earlier searches with the same trial context keeps a copy of each trial
        // its result rests on, marked with the search that measured it (reused_from), so its trial list and count
        // are the manifest's. A copy was not measured again: the duration histogram counts only rows without it.
        new(6, """
            ALTER TABLE trials ADD COLUMN reused_from TEXT;
            DROP TRIGGER trial_counted;
            CREATE TRIGGER trial_counted AFTER INSERT ON trials WHEN NEW.reused_from IS NULL BEGIN
                UPDATE trial_buckets SET count = count + 1, sum_ms = sum_ms + NEW.duration_ms
                WHERE bucket = (SELECT MIN(bucket) FROM trial_buckets WHERE upper_ms IS NULL OR NEW.duration_ms <= upper_ms);
            END;
            """,
            Postgres: PostgresSchema.Step6ReusedTrials),
    ];

    // Step 3's parts: the settings rename in SQLite's JSON functions (PostgreSQL's is PostgresSchema.Step3ClipSetting)
    // and the trial key renames, which are plain SQL on both.
    private const string ClipSetting = """
            UPDATE searches SET settings_json = json_set(json_remove(settings_json, '$.calibration'), '$.clip', json_extract(settings_json, '$.calibration'))
                WHERE json_type(settings_json, '$.calibration') IS NOT NULL;
            """;

    private const string TrialKeyRenames = """
            UPDATE trials SET key = replace(key, 'symmetric-perchannel-', 'symmetric-per-channel-') WHERE kind = 'sensitivity';
            UPDATE trials SET key = replace(key, 'symmetric-pertensor-', 'symmetric-per-tensor-') WHERE kind = 'sensitivity';
            UPDATE trials SET key = replace(key, 'symmetric-per-channel-minmax', 'symmetric-per-channel-min-max') WHERE kind = 'sensitivity';
            UPDATE trials SET key = replace(key, 'symmetric-per-tensor-minmax', 'symmetric-per-tensor-min-max') WHERE kind = 'sensitivity';
            UPDATE trials SET key = replace(key, 'symmetric-per-channel-mseoptimal', 'symmetric-per-channel-mse-optimal') WHERE kind = 'sensitivity';
            UPDATE trials SET key = replace(key, 'symmetric-per-tensor-mseoptimal', 'symmetric-per-tensor-mse-optimal') WHERE kind = 'sensitivity';
            UPDATE trials SET key = replace(key, 'symmetric-per-channel-analyticlaplace', 'symmetric-per-channel-analytic-laplace') WHERE kind = 'sensitivity';
            UPDATE trials SET key = replace(key, 'symmetric-per-tensor-analyticlaplace', 'symmetric-per-tensor-analytic-laplace') WHERE kind = 'sensitivity';
            UPDATE trials SET key = replace(key, 'symmetric-per-channel-analyticgaussian', 'symmetric-per-channel-analytic-gaussian') WHERE kind = 'sensitivity';
            UPDATE trials SET key = replace(key, 'symmetric-per-tensor-analyticgaussian', 'symmetric-per-tensor-analytic-gaussian') WHERE kind = 'sensitivity';
            """;
}
