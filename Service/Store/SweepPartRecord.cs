namespace Bitbudget.Service.Store;

/// <summary>One part of a search's sweep: the layers it measures and who holds or finished it.</summary>
internal sealed record SweepPartRecord(
    string SearchId,
    int Part,
    IReadOnlyList<string> Layers,
    int Trials,
    bool Done,
    string? JobId,
    string? LeaseOwner,
    DateTimeOffset? LeaseUntil,
    int Attempts,
    string? FinishedBy);
