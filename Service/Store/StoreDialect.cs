using System.Data.Common;

namespace Bitbudget.Service.Store;

/// <summary>
/// The few things the SQL databases the store runs on do differently: how a connection is made and set up,
/// which column keeps insertion order, how concurrent migrations are kept apart, the schema steps' text.
/// Everything else (every query, the store's logic) is one code path over ADO.NET.
/// </summary>
internal abstract class StoreDialect
{
    /// <summary>The configuration value that picks this dialect (<c>Bitbudget:Store</c>).</summary>
    public abstract string Name { get; }

    /// <summary>Where the store lives, for logs: a file path or a host and database (never a password).</summary>
    public abstract string Location { get; }

    /// <summary>A column that grows with each insert, to keep "the order of saving" without a timestamp tie.</summary>
    public abstract string InsertOrder { get; }

    /// <summary>An open connection, set up for the store's use.</summary>
    public abstract DbConnection Open();

    /// <summary>Run once before migrating, outside the migration's transaction.</summary>
    public virtual void PrepareForMigration(DbConnection connection)
    {
    }

    /// <summary>
    /// Keeps two processes from migrating at once (API and workers start together on a shared database);
    /// held until <paramref name="transaction"/> ends.
    /// </summary>
    public virtual void LockForMigration(DbConnection connection, DbTransaction transaction)
    {
    }

    /// <summary>The schema step's text for this dialect.</summary>
    public abstract string SqlOf(Migration migration);
}
