namespace Bitbudget.Service.Store;

/// <summary>
/// One numbered schema step. <see cref="Postgres"/> is given only where PostgreSQL needs other text (types,
/// triggers, table rebuilds); a plain step such as <c>ALTER TABLE t ADD COLUMN c TEXT</c> runs on both as written.
/// </summary>
internal sealed record Migration(int Version, string Sqlite, string? Postgres = null);
