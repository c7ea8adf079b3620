using System.Diagnostics;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// Solves the knapsack (or runs greedy), measures the chosen assignment end to end, and steers the
/// additive budget by the measurement (tighter when it missed, looser when it had room) before solving
/// again. Additivity is only a model: layer errors interact, so the measurement, not the prediction, decides.
/// </summary>
internal sealed class AssignmentValidator(
    TrialSession session,
    PlanningProblem problem,
    ITrialStore store,
    IProgress<SearchProgress>? progress,
    CancellationToken cancellationToken)
{
    private readonly List<AssignmentMeasurement> _rounds = [];

    // Read once: a store may be a database, and this loop only adds validations it saves itself.
    private readonly Dictionary<string, TrialRecord> _stored = new(store.LoadAll(), StringComparer.Ordinal);

    public SearchDecision MeetErrorBudget(ErrorBudget budget, SearchMethod method)
    {
        var metric = budget.Metric;
        var reference = session.ReferenceMetrics;
        progress?.Report(new SearchProgress(SearchStage.Validate, 0, SearchRunner.MaxValidationRounds + 1));

        // The highest candidate everywhere is the best the search can do; if it misses, nothing will meet.
        var highest = Measure(problem.Highest(), budget);
        if (!highest.MeetsBudget)
        {
            var got = problem.Judge.Value(highest.Measured, reference);
            var top = problem.Settings.Bits.Max();
            var message = $"Infeasible: {BitWidths.Describe(top)} everywhere gives {MetricValues.Format(metric, got)}; the budget asks for {(AdditiveError.IsLowerBound(metric) ? "at least" : "at most")} {MetricValues.Format(metric, budget.Limit)}. Add a higher candidate bit width, exclude the most sensitive layers, or relax the budget.";
            return new SearchDecision(false, message, null, _rounds, highest.PredictedAdditive);
        }

        // The additive model can be pessimistic (noise from many layers partly cancels) or optimistic
        // (errors compound), so the additive target is steered by measurement in both directions:
        // rescale it by how far the measurement landed from the budget, and bisect between the
        // largest target whose choice met the budget and the smallest whose choice missed.
        var limit = AdditiveError.LimitToAdditive(metric, budget.Limit);
        var target = limit;
        double met = 0, missed = double.PositiveInfinity;
        AssignmentMeasurement best = highest;
        var seen = new HashSet<string>(StringComparer.Ordinal) { highest.Hash };
        for (var round = 1; round <= SearchRunner.MaxValidationRounds; round++)
        {
            cancellationToken.ThrowIfCancellationRequested();
            var selection = method == SearchMethod.Knapsack
                ? KnapsackSolver.MinimumBytes(problem.Layers, target)
                : GreedySolver.MinimumBytes(problem.Layers, target);

            // Greedy answers with its closest assignment even when that misses the target.
            if (selection is null || selection.Error > target)
            {
                // Below what the highest candidates predict: only the highest fits, and it was measured.
                selection = problem.Highest();
            }

            var hash = TrialKeys.AssignmentHash(problem.AssignmentOf(selection));
            AssignmentMeasurement measured;
            if (seen.Add(hash))
            {
                measured = Measure(selection, budget);
                progress?.Report(new SearchProgress(SearchStage.Validate, round, SearchRunner.MaxValidationRounds + 1));
            }
            else
            {
                measured = _rounds.First(r => r.Hash == hash);
            }

            if (measured.MeetsBudget && measured.Bytes < best.Bytes)
            {
                best = measured;
            }

            var measuredAdditive = problem.Judge.ToAdditive(measured.Measured, reference);
            var rescaled = measuredAdditive > 0 ? Math.Max(selection.Error, target * 0.25) * limit / measuredAdditive : target * 4;
            if (measured.MeetsBudget)
            {
                met = Math.Max(met, target);
                rescaled = Math.Min(Math.Max(rescaled, target * 1.05), target * 4);
            }
            else
            {
                missed = Math.Min(missed, target);
                rescaled = Math.Min(rescaled, target * 0.9);
            }

            var next = rescaled > met && rescaled < missed
                ? rescaled
                : double.IsPositiveInfinity(missed) ? met * 2 : met > 0 ? Math.Sqrt(met * missed) : missed / 2;
            if (next <= 0 || Math.Abs(next - target) <= target * 1e-3)
            {
                break;
            }

            target = next;
        }

        var value = problem.Judge.Value(best.Measured, reference);
        var text = $"{FormatBytes(best.Bytes)} ({problem.Float32Bytes / (double)best.Bytes:0.00}x smaller than FP32) measured at {MetricValues.Format(metric, value)} against a budget of {MetricValues.Format(metric, budget.Limit)}.";
        return new SearchDecision(true, text, best, _rounds, best.PredictedAdditive);
    }

    public SearchDecision MeetSizeBudget(SizeBudget budget, SearchMethod method)
    {
        var maxBytes = budget.Bytes ?? problem.TotalBytesForAverageBits(budget.AverageBits!.Value);
        var available = maxBytes - problem.ExcludedBytes - problem.OtherBytes;
        var selection = available <= 0
            ? null
            : method == SearchMethod.Knapsack
                ? KnapsackSolver.MinimumError(problem.Layers, available)
                : GreedySolver.MinimumError(problem.Layers, available);
        if (selection is null || problem.TotalBytes(selection) > maxBytes)
        {
            var smallest = problem.ExcludedBytes + problem.OtherBytes + problem.Layers.Sum(l => l.Choices.Min(c => c.Bytes));
            var message = $"Infeasible: the smallest assignment the candidates allow is {FormatBytes(smallest)}; the budget allows {FormatBytes(maxBytes)}. Add a lower candidate bit width or raise the size budget.";
            return new SearchDecision(false, message, null, _rounds, 0);
        }

        progress?.Report(new SearchProgress(SearchStage.Validate, 0, 1));
        var measured = Measure(selection, budget);
        progress?.Report(new SearchProgress(SearchStage.Validate, 1, 1));
        var value = problem.Judge.Value(measured.Measured, session.ReferenceMetrics);
        var text = $"{FormatBytes(measured.Bytes)} (budget {FormatBytes(maxBytes)}) measured at {MetricValues.Format(budget.Metric, value)}.";
        return new SearchDecision(true, text, measured, _rounds, measured.PredictedAdditive);
    }

    private AssignmentMeasurement Measure(Selection selection, Budget budget)
    {
        var assignment = problem.AssignmentOf(selection);
        var hash = TrialKeys.AssignmentHash(assignment);
        var key = TrialKeys.Validation(hash, SensitivitySweep.ActivationsFor(problem.Settings));
        if (!_stored.TryGetValue(key, out var record))
        {
            var clock = Stopwatch.StartNew();
            var metrics = session.MeasureAssignment(assignment);
            record = new TrialRecord(key, "validation", null, null, hash, metrics, clock.Elapsed.TotalMilliseconds, assignment, SensitivitySweep.ActivationsFor(problem.Settings));
            store.Save(record);
            _stored[key] = record;
        }

        var meets = budget is ErrorBudget error
            && problem.Judge.Meets(error.Limit, record.Metrics, session.ReferenceMetrics);
        var measurement = new AssignmentMeasurement(assignment, hash, problem.TotalBytes(selection), selection.Error, record.Metrics, meets);
        _rounds.Add(measurement);
        return measurement;
    }

    internal static string FormatBytes(long bytes) => bytes switch
    {
        >= 1 << 20 => $"{bytes / 1048576.0:0.00} MiB",
        >= 1 << 10 => $"{bytes / 1024.0:0.0} KiB",
        _ => $"{bytes} bytes",
    };
}
