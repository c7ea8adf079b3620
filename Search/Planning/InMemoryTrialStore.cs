using System.Collections.Concurrent;

namespace Bitbudget.Search.Planning;

/// <summary>A trial store held in memory: for the command line and for tests. Thread-safe; the first save of a key wins.</summary>
public sealed class InMemoryTrialStore : ITrialStore
{
    private readonly ConcurrentDictionary<string, TrialRecord> _trials = new(StringComparer.Ordinal);

    /// <summary>Starts from trials measured earlier (a resumed search).</summary>
    public InMemoryTrialStore(IEnumerable<TrialRecord>? seed = null)
    {
        foreach (var trial in seed ?? [])
        {
            _trials.TryAdd(trial.Key, trial);
        }
    }

    /// <summary>How many times <see cref="Save"/> stored a new trial.</summary>
    public int Saves { get; private set; }

    public IReadOnlyDictionary<string, TrialRecord> LoadAll() => new Dictionary<string, TrialRecord>(_trials, StringComparer.Ordinal);

    public void Save(TrialRecord trial)
    {
        if (_trials.TryAdd(trial.Key, trial))
        {
            Saves++;
        }
    }
}
