using System.Collections.Concurrent;

namespace Bitbudget.Service.Jobs;

/// <summary>
/// Lets a cancel request reach a search running in this process at once; runs in other processes notice
/// the canceled state at their next progress report.
/// </summary>
internal sealed class SearchCancellations
{
    private readonly ConcurrentDictionary<string, ConcurrentDictionary<CancellationTokenSource, byte>> running = new(StringComparer.Ordinal);

    public IDisposable Register(string searchId, CancellationTokenSource source)
    {
        running.GetOrAdd(searchId, _ => new()).TryAdd(source, 0);
        return new Registration(this, searchId, source);
    }

    /// <summary>True while a run of the search is in progress in this process.</summary>
    public bool IsRunningHere(string searchId) => running.TryGetValue(searchId, out var sources) && !sources.IsEmpty;

    public void Cancel(string searchId)
    {
        if (running.TryGetValue(searchId, out var sources))
        {
            foreach (var source in sources.Keys)
            {
                source.Cancel();
            }
        }
    }

    private sealed class Registration(SearchCancellations owner, string searchId, CancellationTokenSource source) : IDisposable
    {
        public void Dispose()
        {
            if (owner.running.TryGetValue(searchId, out var sources))
            {
                sources.TryRemove(source, out _);
            }
        }
    }
}
