namespace Bitbudget.Service.Store;

/// <summary>What a job finds when it tries to take a search.</summary>
internal enum ClaimOutcome
{
    /// <summary>This run now holds the lease and does the work.</summary>
    Claimed,

    /// <summary>Another run holds an unexpired lease.</summary>
    Held,

    /// <summary>The search is already succeeded, failed or canceled (or gone).</summary>
    Final,
}
