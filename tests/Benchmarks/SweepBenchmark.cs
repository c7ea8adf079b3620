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
        // Three layouts of the same trials: one width per run on suffixes with constant weights (the default), widths stacked
        // on the batch axis on the same suffixes, and one width per run on the weights-as-inputs graph (the sweep before).
        var layouts = new[] { new TrialSessionOptions(), new TrialSessionOptions(ConstantSuffixes: true), new TrialSessionOptions(ConstantSuffixes: true, MaxWidthsPerRun: 16) };
        var names = new[] { "one width per run, weights as inputs (default)", "one width per run, constant weights (ConstantSuffixes)", "widths stacked, constant weights (ConstantSuffixes, MaxWidthsPerRun 16)" };
        var notes = new string[layouts.Length];
        var measuredTrials = new IReadOnlyDictionary<string, TrialRecord>[layouts.Length];
        double ideal = 0;
        double Sweep(int layout)
        {
            var clock = Stopwatch.StartNew();
            using var session = TrialSession.Open(model, data, layouts[layout]);
            measuredTrials[layout] = SensitivitySweep.Run(session, trials, new InMemoryTrialStore(), null, CancellationToken.None);
            var elapsed = clock.Elapsed.TotalMilliseconds;
            notes[layout] = session.SweepNote;
            ideal = session.IdealSweepPasses(perLayer);
            return elapsed;
        }

        // Rounds interleave the plain pass and both sweeps, so a shared machine's changing load falls on all three alike;
        // each ratio is taken within its round, then the median over rounds.
        var rounds = Math.Max(1, repeat);
        BenchmarkRun.PlainPass(plain, data);
        var passes = new List<double>();
        var asInputs = new List<double>();
        using var probe = TrialSession.Open(model, data);
        var times = layouts.Select(_ => new List<double>()).ToArray();
        for (var round = 0; round < rounds; round++)
        {
            passes.Add(Timing.Measure(5, () => BenchmarkRun.PlainPass(plain, data)).Median);
            // What a trial on the weights-as-inputs graph starts from: no constant folding or pre-packed weights.
            asInputs.Add(Timing.Measure(5, () => probe.RunFull(new Dictionary<string, float[]>())).Median);
            for (var layout = 0; layout < layouts.Length; layout++)
            {
                times[layout].Add(Sweep(layout));
            }
        }

        Spread Of(IEnumerable<double> values)
        {
            var sorted = values.Order().ToArray();
            return new Spread(sorted[sorted.Length / 2], sorted[0], sorted[^1]);
        }

        var pass = Of(passes);
        var sweep = Of(times[0]);
        var plainSweep = trials.Count * pass.Median;
        ideal *= pass.Median;
        string Ratio(IEnumerable<double> ratios)
        {
            var r = Of(ratios);
            return string.Create(CultureInfo.InvariantCulture, $"{r.Median:0.00} ({r.Min:0.00}-{r.Max:0.00})");
        }

        string ToPlain(int layout) => Ratio(times[layout].Select((t, i) => t / (trials.Count * passes[i])));
        string ToFirst(int layout) => Ratio(times[0].Select((t, i) => t / times[layout][i]));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"plain forward pass {pass}; {rounds} rounds, each: 5 plain passes, 5 passes with weights as inputs, then the sweep in each layout (ratios within a round, median over rounds)"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"forward pass with weights as inputs {Of(asInputs)}  ratio to the plain pass {Ratio(asInputs.Select((t, i) => t / passes[i]))}"));
        for (var layout = 0; layout < layouts.Length; layout++)
        {
            Console.WriteLine(string.Create(
                CultureInfo.InvariantCulture,
                $"whole sweep, {names[layout]} ({trials.Count} trials, session open included) {Of(times[layout])} vs {trials.Count} plain passes {plainSweep:0} ms  ratio {ToPlain(layout)}{(layout == 0 ? " (goal <= 0.5)" : $"; the default vs this {ToFirst(layout)}")}"));
            Console.WriteLine($"   {notes[layout]}");
        }

        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"whole sweep (default) vs the FLOP-weighted ideal {ideal:0} ms  ratio {sweep.Median / ideal:0.00}"));
        for (var layout = 1; layout < layouts.Length; layout++)
        {
            var (a, b) = (measuredTrials[layout], measuredTrials[0]);
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"{names[layout]} vs the default: same trial keys {a.Keys.Order().SequenceEqual(b.Keys.Order())}; largest SQNR difference {LargestDifference(a, b):0.######} dB; top-1 or changed samples differ in {Disagreements(a, b)} of {a.Count} trials"));
        }

        // One layer's widths at a time, sessions open and their cuts cached, layouts interleaved: the runs alone, no builds.
        var open = layouts.Select(o => TrialSession.Open(model, data, o)).ToList();
        try
        {
            foreach (var session in open)
            {
                session.PrepareSweep(perLayer);
            }

            foreach (var layer in new[] { model.Layers[0], model.Layers[model.Layers.Count / 3], model.Layers[2 * model.Layers.Count / 3], model.Layers[^1] })
            {
                var widths = trials.Where(t => t.Layer.Name == layer.Name).Select(t => t.Setting).ToList();
                var layerTimes = layouts.Select(_ => new List<double>()).ToArray();
                for (var round = 0; round < rounds + 2; round++)
                {
                    for (var layout = 0; layout < layouts.Length; layout++)
                    {
                        var timer = Stopwatch.StartNew();
                        open[layout].MeasureLayerWidths(layer, widths, widths.Count);
                        layerTimes[layout].Add(timer.Elapsed.TotalMilliseconds);
                    }
                }

                // The first round builds each layout's session for the layer's cut: left out.
                var kept = layerTimes.Select(t => t.Skip(1).ToList()).ToArray();
                Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"layer '{layer.Name}', {widths.Count} widths, runs only: weights as inputs {Of(kept[0])}, constant weights {Of(kept[1])}, stacked {Of(kept[2])}; constants / inputs {Ratio(kept[1].Select((t, i) => t / kept[0][i]))}, stacked / inputs {Ratio(kept[2].Select((t, i) => t / kept[0][i]))}; first round (the cut's session built and run first): {layerTimes[0][0]:0} / {layerTimes[1][0]:0} / {layerTimes[2][0]:0} ms"));
            }
        }
        finally
        {
            open.ForEach(o => o.Dispose());
        }

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

    /// <summary>Largest SQNR difference between the same trials of two sweeps (0 when they agree bit for bit).</summary>
    private static double LargestDifference(IReadOnlyDictionary<string, TrialRecord> a, IReadOnlyDictionary<string, TrialRecord> b) =>
        a.Where(p => b.ContainsKey(p.Key)).Select(p => (p.Value.Metrics.SqnrDb, b[p.Key].Metrics.SqnrDb))
            .Select(p => p.Item1.Equals(p.Item2) ? 0 : Math.Abs(p.Item1 - p.Item2)).DefaultIfEmpty(0).Max();

    private static int Disagreements(IReadOnlyDictionary<string, TrialRecord> a, IReadOnlyDictionary<string, TrialRecord> b) =>
        a.Count(p => b.TryGetValue(p.Key, out var other) && (other.Metrics.Top1Agreement != p.Value.Metrics.Top1Agreement || other.Metrics.SamplesChanged != p.Value.Metrics.SamplesChanged));
}
