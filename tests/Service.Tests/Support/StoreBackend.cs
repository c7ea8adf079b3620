namespace Bitbudget.Service.Tests.Support;

/// <summary>The databases the store runs on; store tests run once on each.</summary>
public enum StoreBackend
{
    Sqlite,
    Postgres,
}
