using System.Diagnostics;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Benchmarks;

/// <summary>
/// Nearest against compensated rounding, each without and with bias correction, side by side in one process, on whole
/// searches with packed storage and candidates 2, 3, 4, 5, 6, 8 bits: (a) the packed size of the plan meeting sqnr>=30, (b) the measured SQNR of the
/// least-error plan within the packed size of uniform 4-bit (and of uniform 4-bit itself), (c) what the sweep costs:
/// reference, input gathering and sweep together, against nearest's reference and sweep.
/// </summary>
internal static class RoundingBenchmark
{
    private static readonly int[] Bits = [2, 3, 4, 5, 6, 8];

    private static readonly (string Name, IReadOnlyList<RoundingMethod> Rounding, bool BiasCorrection)[] Variants =
    [
        ("nearest", [RoundingMethod.Nearest], false),
        ("nearest+bias", [RoundingMethod.Nearest], true),
        ("compensated", [RoundingMethod.Compensated], false),
        ("compensated+bias", [RoundingMethod.Compensated], true),
        ("both", [RoundingMethod.Nearest, RoundingMethod.Compensated], false),
        ("both+bias", [RoundingMethod.Nearest, RoundingMethod.Compensated], true),
    ];

    public static void Run(OnnxModel model, CalibrationSet data)
    {
        Console.WriteLine();
        Console.WriteLine($"== {model.Name}: {model.Layers.Count} layers, {model.Layers.Sum(l => l.ParameterCount)} weights, {data.SampleCount} samples; packed storage, bits {string.Join(",", Bits)}");
        var uniform4 = new ModelSizer(model, StorageRule.Packed);
        var uniform4Bytes = uniform4.OtherBytes + model.Layers.Sum(l => uniform4.LayerBytes(l, new LayerSetting(4)));

        // One untimed nearest search first: the first variant would otherwise pay the JIT and ONNX Runtime's first runs alone.
        SearchRunner.Run(model, data, Settings(new ErrorBudget(BudgetMetric.Sqnr, 30), [RoundingMethod.Nearest], false), new InMemoryTrialStore(), null, CancellationToken.None);
        double nearestSweep = 0;
        long? nearestPlan = null;
        double? nearestAt4 = null;
        foreach (var (name, rounding, bias) in Variants)
        {
            var store = new InMemoryTrialStore();
            var stages = new StageClock();
            var error = SearchRunner.Run(model, data, Settings(new ErrorBudget(BudgetMetric.Sqnr, 30), rounding, bias), store, stages, CancellationToken.None);
            var sweepMs = stages.SweepMilliseconds;
            var size = SearchRunner.Run(model, data, Settings(new SizeBudget(uniform4Bytes, null, BudgetMetric.Sqnr), rounding, bias), store, null, CancellationToken.None);
            var uniform = Uniform4Sqnr(model, data, rounding, bias);
            var compensatedLayers = error.Feasible ? Manifest(error).Layers.Count(l => l.Rounding == "compensated") : 0;
            if (name == "nearest")
            {
                nearestSweep = sweepMs;
                nearestPlan = error.Feasible ? error.Bytes : null;
                nearestAt4 = size.Feasible ? size.MeasuredError : null;
            }

            Console.WriteLine(
                $"{name,-16} (a) sqnr>=30: {(error.Feasible ? $"{error.Bytes,9} B packed, {error.MeasuredError,6:0.00} dB, {Manifest(error).Outcome.ValidationRounds} rounds, {compensatedLayers} layers compensated" : "infeasible"),-70}"
                + $" {Ratio(error.Feasible ? error.Bytes : null, nearestPlan)}");
            Console.WriteLine(
                $"{string.Empty,-16} (b) <= {uniform4Bytes} B (uniform 4-bit): {(size.Feasible ? $"{size.MeasuredError,6:0.00} dB ({size.Bytes} B)" : "infeasible")}{Delta(size.Feasible ? size.MeasuredError : null, nearestAt4)}; uniform 4-bit itself {uniform:0.00} dB");
            Console.WriteLine(
                $"{string.Empty,-16} (c) reference + inputs + sweep {sweepMs,9:0} ms, {sweepMs / nearestSweep:0.00}x nearest's");
        }
    }

    /// <summary>
    /// Where the added cost of compensated rounding with bias correction goes, stage by stage in one process: the input
    /// pass, the Cholesky factors with the first width's rounding, five more widths, against the session with its FP32
    /// reference and a nearest sweep of every layer at six widths (whole-graph and suffix runs as a search plans them).
    /// </summary>
    public static void Profile(OnnxModel model, CalibrationSet data)
    {
        var clock = Stopwatch.StartNew();
        var inputs = LayerInputCollector.Collect(model, data, model.Layers, 32, 512L << 20);
        var collect = clock.Elapsed.TotalMilliseconds;
        var rounder = new WeightRounder(model, inputs, correctBiases: true);
        var compensable = model.Layers.Where(l => rounder.Compensates(l.Name)).ToList();
        clock.Restart();
        compensable.ForEach(l => rounder.Quantize(l, new LayerSetting(8, Rounding: RoundingMethod.Compensated)));
        var first = clock.Elapsed.TotalMilliseconds;
        clock.Restart();
        foreach (var bits in new[] { 2, 3, 4, 5, 6 })
        {
            compensable.ForEach(l => rounder.Quantize(l, new LayerSetting(bits, Rounding: RoundingMethod.Compensated)));
        }

        var more = clock.Elapsed.TotalMilliseconds;
        clock.Restart();
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(Rounder: rounder));
        var open = clock.Elapsed.TotalMilliseconds;
        clock.Restart();
        foreach (var layer in model.Layers)
        {
            foreach (var bits in new[] { 8, 6, 5, 4, 3, 2 })
            {
                session.MeasureLayer(layer, new LayerSetting(bits), Bits.Length);
            }
        }

        var sweep = clock.Elapsed.TotalMilliseconds;
        Console.WriteLine(
            $"{model.Name}: input pass {collect:0} ms, factors + first width {first:0} ms, five more widths {more:0} ms; session and reference {open:0} ms, nearest sweep {sweep:0} ms"
            + $" (added {(collect + first + more) / (open + sweep):0.00}x of session + sweep)");
    }

    private static SearchSettings Settings(Budget budget, IReadOnlyList<RoundingMethod> rounding, bool biasCorrection) =>
        new(budget, Bits, Storage: StorageRule.Packed, Rounding: rounding, BiasCorrection: biasCorrection);

    private static Search.Manifest.AssignmentManifest Manifest(SearchResult result) => Search.Manifest.ManifestJson.Deserialize(result.ManifestJson);

    private static double Uniform4Sqnr(OnnxModel model, CalibrationSet data, IReadOnlyList<RoundingMethod> rounding, bool biasCorrection)
    {
        var compensated = rounding.Contains(RoundingMethod.Compensated);
        var rounder = new WeightRounder(model, compensated || biasCorrection ? LayerInputCollector.Collect(model, data, model.Layers, 32, 512L << 20) : new Dictionary<string, LayerInputs>(), biasCorrection);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false, Rounder: rounder));
        var setting = new LayerSetting(4, Rounding: compensated ? RoundingMethod.Compensated : RoundingMethod.Nearest, BiasCorrection: biasCorrection);
        return session.MeasureAssignment(model.Layers.ToDictionary(l => l.Name, _ => setting)).SqnrDb;
    }

    private static string Ratio(long? ours, long? nearest) =>
        ours is { } a && nearest is { } b ? $"{(double)a / b:0.000}x nearest's ({(1 - ((double)a / b)) * 100:0.0}% smaller)" : string.Empty;

    private static string Delta(double? ours, double? nearest) =>
        ours is { } a && nearest is { } b ? $" ({a - b:+0.00;-0.00} dB vs nearest)" : string.Empty;

    /// <summary>Wall time from the start of the reference stage (input gathering included) to the start of the search stage.</summary>
    private sealed class StageClock : IProgress<SearchProgress>
    {
        private readonly Stopwatch _clock = new();
        private double? _searchStart;

        public double SweepMilliseconds => _searchStart ?? double.NaN;

        public void Report(SearchProgress value)
        {
            if (value.Stage == SearchStage.Reference && value.Done == 0 && !_clock.IsRunning)
            {
                _clock.Start();
            }
            else if (value.Stage == SearchStage.Search && _searchStart is null)
            {
                _searchStart = _clock.Elapsed.TotalMilliseconds;
            }
        }
    }
}
