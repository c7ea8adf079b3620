namespace Bitbudget.Service.Hosting;

/// <summary>The values of <c>Bitbudget:Store</c>.</summary>
internal static class StoreKinds
{
    /// <summary>SQLite files in the data folder, Hangfire on SQLite: one machine.</summary>
    public const string Sqlite = "sqlite";

    /// <summary>A shared PostgreSQL database for the store and Hangfire: an API and workers on several machines.</summary>
    public const string Postgres = "postgres";
}
