using System.Diagnostics;
using System.Globalization;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Benchmarks;

/// <summary>
/// The whole sweep on one model, side by side in one process: the sweep (session open, cut planning and caching
/// included) against L x B plain forward passes, against the FLOP-weighted ideal (every trial runs only what is
/// downstream of its layer, for free), and against a peer that rebuilds a session per trial (timed on a few trials
/// and multiplied out); then a second search with another budget against the first. Medians over repeats, with
/// min and max.
/// </summary>
internal static class SweepBenchmark
{
    /// <summary>
    /// The sweep's memory on a real-size model without the hours of a whole sweep: the session opens, plans the cuts
    /// for every trial and caches their activations as a whole sweep would, then runs <paramref name="trials"/> trials
    /// spread over the model (every cut's suffix session is built on the way).
    /// </summary>
    public static void Memory(OnnxModel model, CalibrationSet data, IReadOnlyList<int> bits, int trials)
    {
        var planned = SensitivitySweep.Plan(model.Layers, new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), bits));
        var clock = Stopwatch.StartNew();
        using var session = TrialSession.Open(model, data);
        session.PrepareSweep(planned.GroupBy(t => t.Layer.Name).ToDictionary(g => g.Key, g => g.Count(), StringComparer.Ordinal));
        var open = clock.Elapsed.TotalMilliseconds;
        var spread = Enumerable.Range(0, trials).Select(i => planned[i * (planned.Count - 1) / Math.Max(1, trials - 1)]).Distinct().ToList();
        clock.Restart();
        SensitivitySweep.Run(session, spread, new InMemoryTrialStore(), null, CancellationToken.None);
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"== memory: {model.Name}: {model.Layers.Count} layers, {data.SampleCount} samples; open, plan and cache {open:0} ms; {spread.Count} of {planned.Count} trials in {clock.Elapsed.TotalMilliseconds:0} ms"));
        Console.WriteLine($"   {session.SweepNote}");
    }

    public static void Run(OnnxModel model, CalibrationSet data, int repeat, IReadOnlyList<int> bits)
    {
        Console.WriteLine();
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"== sweep: {model.Name}: {model.Layers.Count} layers, {data.SampleCount} samples, widths {string.Join(',', bits)}"));
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), bits);
        var trials = SensitivitySweep.Plan(model.Layers, settings);
        var perLayer = trials.GroupBy(t => t.Layer.Name).ToDictionary(g => g.Key, g => g.Count(), StringComparer.Ordinal);

        using var plain = new InferenceSession(model.BuildWithWeights(new Dictionary<string, float[]>()));
        var pass = Timing.Measure(repeat, () => BenchmarkRun.PlainPass(plain, data));

        string note = "";
        double ideal = 0;
        var sweep = Timing.Measure(Math.Max(1, repeat / 3), () =>
        {
            using var session = TrialSession.Open(model, data);
            SensitivitySweep.Run(session, trials, new InMemoryTrialStore(), null, CancellationToken.None);
            note = session.SweepNote;
            ideal = session.IdealSweepPasses(perLayer);
        });
        var plainSweep = trials.Count * pass.Median;
        ideal *= pass.Median;
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"plain forward pass {pass}"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"whole sweep ({trials.Count} trials, session open included) {sweep} vs {trials.Count} plain passes {plainSweep:0} ms  ratio {sweep.Median / plainSweep:0.00} (goal <= 0.5)"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"whole sweep vs the FLOP-weighted ideal {ideal:0} ms  ratio {sweep.Median / ideal:0.00}"));
        Console.WriteLine($"   {note}");

        // The peer: a session rebuilt with the quantized weight for every trial, timed on a few layers spread over the model.
        var sampled = Enumerable.Range(0, 3).Select(i => model.Layers[i * (model.Layers.Count - 1) / 2]).Distinct().ToList();
        var rebuild = Timing.Measure(Math.Max(3, repeat / 2), () =>
        {
            foreach (var layer in sampled)
            {
                var weight = new float[layer.ParameterCount];
                WeightQuantizer.FakeQuantize(model.GetWeight(layer), layer.Shape, layer.ChannelAxis, new LayerSetting(4), weight);
                using var rebuilt = new InferenceSession(model.BuildWithWeights(new Dictionary<string, float[]> { [layer.Name] = weight }));
                BenchmarkRun.PlainPass(rebuilt, data);
            }
        });
        var peerPerTrial = rebuild.Median / sampled.Count;
        var oursPerTrial = sweep.Median / trials.Count;
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"per trial: ours {oursPerTrial:0.0} ms vs a session rebuilt per trial {peerPerTrial:0.0} ms  {peerPerTrial / oursPerTrial:0.0}x faster (goal >= 5x)"));

        // No sweep twice: the second search with another budget reads the first's sensitivity trials (as the service and the CLI cache do).
        var store = new InMemoryTrialStore();
        var clock = Stopwatch.StartNew();
        SearchRunner.Run(model, data, settings, store, null, CancellationToken.None);
        var first = clock.Elapsed.TotalMilliseconds;
        var sensitivities = store.LoadAll().Values.Where(t => t.Kind == "sensitivity").ToList();
        clock.Restart();
        SearchRunner.Run(model, data, settings with { Budget = new ErrorBudget(BudgetMetric.Sqnr, 20) }, new InMemoryTrialStore(sensitivities), null, CancellationToken.None);
        var second = clock.Elapsed.TotalMilliseconds;
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"second search, another budget, vs the first: {second:0} ms vs {first:0} ms  ratio {second / first:0.00} (goal <= 0.1)"));
    }
}
