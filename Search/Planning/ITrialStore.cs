namespace Bitbudget.Search.Planning;

/// <summary>
/// Where a search keeps its trials. The engine asks for what is already stored before measuring and
/// saves each trial as soon as it finishes; saving an existing key must be a no-op.
/// </summary>
public interface ITrialStore
{
    /// <summary>Every trial stored for this search, by key.</summary>
    IReadOnlyDictionary<string, TrialRecord> LoadAll();

    /// <summary>Stores one trial; a second save of the same key changes nothing.</summary>
    void Save(TrialRecord trial);
}
