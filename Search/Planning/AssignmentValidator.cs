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
    // Solves of the additive model per corrected choice; each is fast next to a trial, and the steering converges in a few.
    private const int MaxCorrectedSolves = 24;

    /// <summary>A met assignment whose measured additive error is this close to the limit (as a fraction) ends the search.</summary>
    private const double UsedBudgetToStop = 0.05;

    /// <summary>Width combinations measured per layer pair: its widths in the first assignment that needed it, and one more.</summary>
    private const int CombinationsPerPair = 2;

    // Measure-and-solve passes before one validation; each pass only adds trials while new pairs or widths come up.
    private const int MaxPairPasses = 3;

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
        // (errors compound), so the model's limit is steered by measurement in both directions:
        // rescale it by how far the measurement landed from the budget, and bisect between the
        // largest limit whose choice met the budget and the smallest whose choice missed. With pair terms,
        // the limit bounds the corrected prediction and the solver's additive target is found without measuring.
        var limit = AdditiveError.LimitToAdditive(metric, budget.Limit);
        var model = new PairwiseModel(problem.Layers);
        var target = limit;
        double met = 0, missed = double.PositiveInfinity;
        AssignmentMeasurement best = highest;
        var seen = new HashSet<string>(StringComparer.Ordinal) { highest.Hash };
        for (var round = 1; round <= SearchRunner.MaxValidationRounds; round++)
        {
            cancellationToken.ThrowIfCancellationRequested();
            var (selection, predicted) = SolveFor(model, target, method);
            var hash = TrialKeys.AssignmentHash(problem.AssignmentOf(selection));
            if (!seen.Contains(hash) && problem.Settings.Pairs > 0)
            {
                (selection, predicted) = MeasurePairs(model, selection, predicted, target, method, seen);
                hash = TrialKeys.AssignmentHash(problem.AssignmentOf(selection));
            }

            AssignmentMeasurement measured;
            if (seen.Add(hash))
            {
                measured = Measure(selection, budget, model.IsAdditive ? null : predicted);
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

            // An assignment that meets the budget using nearly all of it leaves too little room for a smaller one to be worth a
            // measurement (0.05 of the noise power is 0.2 dB at an SQNR budget); common practice for stopping a bracketing search.
            var measuredAdditive = problem.Judge.ToAdditive(measured.Measured, reference);
            if (measured.MeetsBudget && measured == best && measuredAdditive >= limit * (1 - UsedBudgetToStop))
            {
                break;
            }

            var rescaled = measuredAdditive > 0 ? Math.Max(predicted, target * 0.25) * limit / measuredAdditive : target * 4;
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

            if (NextTarget(target, rescaled, met, missed) is not { } next)
            {
                break;
            }

            target = next;
        }

        var value = problem.Judge.Value(best.Measured, reference);
        var text = $"{FormatBytes(best.Bytes)} ({problem.Float32Bytes / (double)best.Bytes:0.00}x smaller than FP32) measured at {MetricValues.Format(metric, value)} against a budget of {MetricValues.Format(metric, budget.Limit)}.";
        return new SearchDecision(true, text, best, _rounds, best.PredictedAdditive, model.Terms);
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

    /// <summary>
    /// Pair trials where the validation is about to go (<see cref="PairRanking"/>): before an assignment not measured yet is
    /// validated, its highest-ranked pairs are measured at its widths, the corrected model is solved again, and so on while
    /// that brings new pairs or widths into play. At most <see cref="SearchSettings.Pairs"/> layer pairs in all, each at no
    /// more than <see cref="CombinationsPerPair"/> width combinations, so a search adds at most twice that many trials.
    /// </summary>
    private (Selection Selection, double Predicted) MeasurePairs(PairwiseModel model, Selection selection, double predicted, double limit, SearchMethod method, HashSet<string> seen)
    {
        var maxPairs = problem.Settings.Pairs;
        for (var pass = 0; pass < MaxPairPasses; pass++)
        {
            var added = false;
            foreach (var (first, second) in PairRanking.Choose(problem.Layers, selection, maxPairs))
            {
                var (firstChoice, secondChoice) = (selection.ChoiceIndex[first], selection.ChoiceIndex[second]);
                var combinations = model.Combinations(first, second);
                if (model.Measured(first, firstChoice, second, secondChoice)
                    || combinations >= CombinationsPerPair
                    || (combinations == 0 && model.PairCount >= maxPairs))
                {
                    continue;
                }

                model.Add(MeasurePair(first, firstChoice, second, secondChoice));
                added = true;
            }

            if (!added)
            {
                break;
            }

            (selection, predicted) = SolveFor(model, limit, method);
            if (seen.Contains(TrialKeys.AssignmentHash(problem.AssignmentOf(selection))))
            {
                break;
            }
        }

        return (selection, predicted);
    }

    /// <summary>One pair trial, read from the store when a run before measured it.</summary>
    private PairTerm MeasurePair(int first, int firstChoice, int second, int secondChoice)
    {
        cancellationToken.ThrowIfCancellationRequested();
        var activations = SensitivitySweep.ActivationsFor(problem.Settings);
        var (a, b) = (problem.Layers[first], problem.Layers[second]);
        var (settingA, settingB) = (Setting(a.Choices[firstChoice]), Setting(b.Choices[secondChoice]));
        var key = TrialKeys.Pair(a.Name, settingA, b.Name, settingB, activations);
        var record = Recorded(key, "pair", null, new SortedDictionary<string, LayerSetting>(StringComparer.Ordinal) { [a.Name] = settingA, [b.Name] = settingB });

        var joint = problem.Judge.ToAdditive(record.Metrics, session.ReferenceMetrics);
        return new PairTerm(first, firstChoice, second, secondChoice, joint, joint - a.Choices[firstChoice].Error - b.Choices[secondChoice].Error, key);
    }

    private LayerSetting Setting(PlanningChoice choice) => SensitivitySweep.SettingFor(choice.Bits, problem.Settings) with { Rounding = choice.Rounding };

    /// <summary>The solver's choice for an additive target; when nothing meets the target, every layer at its highest candidate.</summary>
    private Selection Solve(double target, SearchMethod method)
    {
        var selection = method == SearchMethod.Knapsack
            ? KnapsackSolver.MinimumBytes(problem.Layers, target)
            : GreedySolver.MinimumBytes(problem.Layers, target);

        // Greedy answers with its closest assignment even when that misses the target; below what the
        // highest candidates predict, only the highest fits, and it was measured.
        return selection is null || selection.Error > target ? problem.Highest() : selection;
    }

    /// <summary>
    /// The solver's choice whose prediction meets <paramref name="limit"/>, and that prediction. Additive alone, the solver's
    /// target is the limit. With pair terms, the solver still solves the additive model exactly, and its target is steered
    /// (rescaled by how far the corrected prediction landed from the limit, bisected between the largest target that met it
    /// and the smallest that did not) to the largest one whose choice the corrected model predicts to meet the limit: no measurement.
    /// </summary>
    private (Selection Selection, double Predicted) SolveFor(PairwiseModel model, double limit, SearchMethod method)
    {
        if (model.IsAdditive)
        {
            var additive = Solve(limit, method);
            return (additive, additive.Error);
        }

        double target = limit, good = 0, bad = double.PositiveInfinity;
        (Selection Selection, double Predicted)? found = null;
        for (var step = 0; step < MaxCorrectedSolves; step++)
        {
            var selection = Solve(target, method);
            var predicted = model.Predict(selection);
            if (predicted <= limit)
            {
                if (target > good)
                {
                    (good, found) = (target, (selection, predicted));
                }
            }
            else
            {
                bad = Math.Min(bad, target);
            }

            var rescaled = predicted > 0 ? target * limit / predicted : target * 4;
            if (NextTarget(target, rescaled, good, bad) is not { } next)
            {
                break;
            }

            target = next;
        }

        if (found is { } chosen)
        {
            return chosen;
        }

        var highest = problem.Highest();
        return (highest, model.Predict(highest));
    }

    private AssignmentMeasurement Measure(Selection selection, Budget budget, double? corrected = null)
    {
        var assignment = problem.AssignmentOf(selection);
        var hash = TrialKeys.AssignmentHash(assignment);
        var record = Recorded(TrialKeys.Validation(hash, SensitivitySweep.ActivationsFor(problem.Settings)), "validation", hash, assignment);

        var meets = budget is ErrorBudget error
            && problem.Judge.Meets(error.Limit, record.Metrics, session.ReferenceMetrics);
        var measurement = new AssignmentMeasurement(assignment, hash, problem.TotalBytes(selection), selection.Error, record.Metrics, meets, corrected);
        _rounds.Add(measurement);
        return measurement;
    }

    /// <summary>The stored trial under <paramref name="key"/>, or <paramref name="assignment"/> measured end to end now and saved under it.</summary>
    private TrialRecord Recorded(string key, string kind, string? assignmentHash, IReadOnlyDictionary<string, LayerSetting> assignment)
    {
        if (!_stored.TryGetValue(key, out var record))
        {
            var clock = Stopwatch.StartNew();
            var metrics = session.MeasureAssignment(assignment);
            record = new TrialRecord(key, kind, null, null, assignmentHash, metrics, clock.Elapsed.TotalMilliseconds, assignment, SensitivitySweep.ActivationsFor(problem.Settings));
            store.Save(record);
            _stored[key] = record;
        }

        return record;
    }

    /// <summary>
    /// The next additive target, shared by the measured loop and the corrected-prediction solves: the rescaled target when it
    /// lies strictly between the largest target that met (<paramref name="met"/>) and the smallest that missed
    /// (<paramref name="missed"/>), else a bisection between them (geometric, as targets span decades); null when the
    /// target has stopped moving.
    /// </summary>
    private static double? NextTarget(double target, double rescaled, double met, double missed)
    {
        var next = rescaled > met && rescaled < missed
            ? rescaled
            : double.IsPositiveInfinity(missed) ? met * 2 : met > 0 ? Math.Sqrt(met * missed) : missed / 2;
        return next <= 0 || Math.Abs(next - target) <= target * 1e-3 ? null : next;
    }

    internal static string FormatBytes(long bytes) => bytes switch
    {
        >= 1 << 20 => $"{bytes / 1048576.0:0.00} MiB",
        >= 1 << 10 => $"{bytes / 1024.0:0.0} KiB",
        _ => $"{bytes} bytes",
    };
}
