using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;

namespace Bitbudget.Benchmarks;

/// <summary>
/// The search with pair terms off against on, side by side in one process, on whole searches with packed storage and
/// candidates 2, 3, 4, 5, 6, 8 bits and FP16 (so nearest rounding can meet the budget on every model): how many assignments the validation measured (the highest-everywhere check
/// included), how far the first assignment the search chose was predicted from its measurement (additive alone when off,
/// additive plus pair terms when on), and the pair trials that cost. The runs share one trial store, so the sweep is
/// measured once; the rounds are counted from each search's own manifest, reused trials included.
/// </summary>
internal static class PairwiseBenchmark
{
    private static readonly int[] Bits = [2, 3, 4, 5, 6, 8, 16];

    public static void Run(OnnxModel model, CalibrationSet data, double sqnr, IReadOnlyList<int> pairCounts, bool verbose = false)
    {
        Console.WriteLine();
        Console.WriteLine($"== {model.Name}: {model.Layers.Count} layers, {data.SampleCount} samples; sqnr>={sqnr}, packed storage, bits {string.Join(",", Bits)}");
        var store = new InMemoryTrialStore();
        foreach (var pairs in pairCounts.Prepend(0))
        {
            var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, sqnr), Bits, Storage: StorageRule.Packed, Pairs: pairs);
            var result = SearchRunner.Run(model, data, settings, store, null, CancellationToken.None);
            var manifest = ManifestJson.Deserialize(result.ManifestJson);
            var rounds = manifest.Outcome.Rounds ?? [];
            var first = rounds.Count > 1 ? rounds[1] : null;
            var predicted = first is null ? double.NaN : first.PredictedWithPairs ?? first.Predicted;
            var firstText = first is null
                ? "no assignment chosen past the highest"
                : $"first chosen: predicted {first.Predicted,6:0.00} dB additive{(first.PredictedWithPairs is { } p ? $", {p,6:0.00} dB with pairs" : string.Empty)}, measured {first.Measured,6:0.00} dB ({(first.MeetsBudget ? "meets" : "misses")}), |predicted - measured| {Math.Abs(predicted - first.Measured):0.00} dB";
            Console.WriteLine(
                $"pairs {pairs,2}: {(result.Feasible ? $"{result.Bytes,9} B, {result.MeasuredError,6:0.00} dB" : "infeasible"),-24} {manifest.Outcome.ValidationRounds} rounds, {manifest.Outcome.Pairs?.Count ?? 0,2} pair trials; {firstText}");
            if (verbose)
            {
                foreach (var round in rounds)
                {
                    Console.WriteLine($"           {round.Bytes,9} B: predicted {round.Predicted,6:0.00} dB, with pairs {round.PredictedWithPairs,6:0.00} dB, measured {round.Measured,6:0.00} dB");
                }
            }
        }
    }
}
