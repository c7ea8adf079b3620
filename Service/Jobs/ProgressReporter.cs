using Bitbudget.Search.Planning;
using Bitbudget.Service.Searches;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Jobs;

/// <summary>
/// Receives the engine's progress on the engine's thread and writes it to the store at most every
/// <see cref="MinInterval"/> (and at every stage change), renewing the lease with it. When the store says
/// the search is no longer this run's (canceled elsewhere), it cancels the run.
/// </summary>
internal sealed class ProgressReporter(SearchStore store, string searchId, string owner, TimeSpan lease, CancellationTokenSource run)
    : IProgress<SearchProgress>
{
    public static readonly TimeSpan MinInterval = TimeSpan.FromMilliseconds(500);

    private readonly Lock gate = new();
    private SearchProgress current = new(SearchStage.Reference, 0, 0);
    private SearchStage? stage;
    private DateTimeOffset stageStarted;
    private int doneAtStageStart;
    private DateTimeOffset lastWrite = DateTimeOffset.MinValue;

    public void Report(SearchProgress value)
    {
        ArgumentNullException.ThrowIfNull(value);
        lock (gate)
        {
            var now = DateTimeOffset.UtcNow;
            var stageChanged = value.Stage != stage;
            if (stageChanged)
            {
                stage = value.Stage;
                stageStarted = now;
                doneAtStageStart = value.Done;
            }

            current = value;
            if (stageChanged || value.Done >= value.Total || now - lastWrite >= MinInterval)
            {
                Write(now);
            }
        }
    }

    /// <summary>Writes the latest progress again; the heartbeat calls this so the lease stays fresh between reports.</summary>
    public void Heartbeat()
    {
        lock (gate)
        {
            Write(DateTimeOffset.UtcNow);
        }
    }

    private void Write(DateTimeOffset now)
    {
        lastWrite = now;
        if (!store.Report(searchId, owner, lease, SearchVocabulary.StageName(current.Stage), current.Done, current.Total, Eta(now)))
        {
            run.Cancel();
        }
    }

    /// <summary>Seconds left in the current stage at the stage's pace so far; null until a unit of it is done.</summary>
    private double? Eta(DateTimeOffset now)
    {
        var doneInStage = current.Done - doneAtStageStart;
        if (doneInStage <= 0 || current.Total <= 0)
        {
            return null;
        }

        var perUnit = (now - stageStarted).TotalSeconds / doneInStage;
        return Math.Round(Math.Max(0, current.Total - current.Done) * perUnit, 1);
    }
}
