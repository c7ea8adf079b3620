namespace Bitbudget.Service.Store;

/// <summary>
/// Whether the data folder can be written right now, found by writing to it: one row of the database and
/// one small file beside the blobs. Reads keep working on a full or read-only disk, so only a write tells.
/// The last answer is kept so that, while the store is known unwritable, writes are refused up front
/// (503 store-unavailable) and each refusal probes again, letting the first write after the fix through.
/// </summary>
internal sealed class StoreProbe(Database database, BlobStore blobs)
{
    private volatile string? lastFault;

    /// <summary>True when the last probe (or a write that failed on the disk) found the store unwritable.</summary>
    public bool KnownUnwritable => lastFault is not null;

    /// <summary>Writes to the database and the blob folder.</summary>
    /// <returns>Null when both took the write; otherwise a sentence saying which could not, and why.</returns>
    public string? Probe()
    {
        var faults = new List<string>(2);
        try
        {
            database.ProbeWrite();
        }
        catch (Exception e) when (e is System.Data.Common.DbException || StorageFault.Is(e))
        {
            faults.Add($"the database cannot be written ({e.Message})");
        }

        try
        {
            blobs.ProbeWrite();
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            faults.Add($"the blob folder cannot be written ({e.Message})");
        }

        lastFault = faults.Count == 0 ? null : string.Join("; ", faults);
        return lastFault;
    }
}
