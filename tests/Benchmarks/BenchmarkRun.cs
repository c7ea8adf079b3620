using System.Diagnostics;
using System.Globalization;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Benchmarks;

/// <summary>
/// Measures, side by side in one process: a trial against a plain forward pass, weights-as-inputs
/// against rebuilding a session per trial, a suffix trial against a full trial, the whole sweep
/// against layers x bits forward passes, a trial with per-output metrics against one with pooled
/// metrics only, the knapsack on 2,000 synthetic layers x 7 choices, and peak memory. Prints ratios, which travel between machines better than absolute times.
/// </summary>
internal static class BenchmarkRun
{
    public static int Run(string[] args)
    {
        var ocr = Option(args, "--ocr") ?? Path.Combine(
            Environment.GetEnvironmentVariable("BITBUDGET_MODEL_CACHE") ?? Path.Combine(Environment.GetFolderPath(Environment.SpecialFolder.UserProfile), ".cache", "bitbudget", "ocr"),
            "package", "assets");
        var demo = Option(args, "--demo");
        var samples = int.Parse(Option(args, "--samples") ?? "8", CultureInfo.InvariantCulture);
        var repeat = int.Parse(Option(args, "--repeat") ?? "7", CultureInfo.InvariantCulture);

        Console.WriteLine($"Bitbudget benchmark  ({Environment.ProcessorCount} cores, {RuntimeInfo()})");
        if (Option(args, "--only") == "knapsack")
        {
            KnapsackBenchmark(repeat);
            return 0;
        }

        // One model's whole sweep in a process of its own, so the peak working set printed at the end is that sweep's.
        if (Option(args, "--sweep") is { } sweepModel)
        {
            var size = (Option(args, "--size") ?? "48x192").Split('x').Select(v => int.Parse(v, CultureInfo.InvariantCulture)).ToArray();
            var bits = (Option(args, "--bits") ?? "2,3,4,5,6,8").Split(',').Select(v => int.Parse(v, CultureInfo.InvariantCulture)).ToArray();
            var model = OnnxModel.LoadFile(File.Exists(sweepModel) ? sweepModel : Path.Combine(ocr, sweepModel));
            if (Option(args, "--trials") is { } limit)
            {
                SweepBenchmark.Memory(model, SyntheticData(model, samples, size[0], size[1]), bits, int.Parse(limit, CultureInfo.InvariantCulture));
            }
            else
            {
                SweepBenchmark.Run(model, SyntheticData(model, samples, size[0], size[1]), repeat, bits);
            }

            var peak = Process.GetCurrentProcess().PeakWorkingSet64;
            Console.WriteLine($"peak working set: {peak / 1048576.0:0} MiB (goal for the detector and recogniser at 32 samples: <= 1024 MiB)");
            return 0;
        }

        if (args.Contains("--pairwise"))
        {
            // Pair terms off against on (PairwiseBenchmark): the demo and the three OCR models, at the budgets of README's size table.
            var pairCounts = (Option(args, "--pairs") ?? "8").Split(',').Select(v => int.Parse(v, CultureInfo.InvariantCulture)).ToList();
            if (demo is not null)
            {
                var hive = OnnxModel.LoadFile(Path.Combine(demo, "hive-monitor.onnx"));
                PairwiseBenchmark.Run(hive, CalibrationSet.Create(DatasetReader.Read(File.ReadAllBytes(Path.Combine(demo, "calibration.npz"))), hive.Inputs), 30, pairCounts, args.Contains("--rounds"));
            }

            // The OCR calibration sets: scripts/make-ocr-pages.py's NumPy pages in --data, else uniform noise of the same sizes.
            var pages = Option(args, "--data");
            foreach (var (file, set, sqnr, height, width) in new[] { ("ch_ppocr_mobile_v2.0_cls_infer.onnx", "classifier", 30.0, 48, 192), ("ch_PP-OCRv4_det_infer.onnx", "detector", 15.0, 128, 128), ("ch_PP-OCRv4_rec_infer.onnx", "recogniser", 30.0, 48, 320) })
            {
                var path = Path.Combine(ocr, file);
                if (Option(args, "--model") is { } only && !file.Contains(only, StringComparison.Ordinal))
                {
                    continue;
                }

                if (File.Exists(path))
                {
                    var model = OnnxModel.LoadFile(path);
                    var npz = pages is null ? null : Path.Combine(pages, set + ".npz");
                    var data = npz is not null && File.Exists(npz)
                        ? CalibrationSet.Create(DatasetReader.Read(File.ReadAllBytes(npz)), model.Inputs)
                        : SyntheticData(model, samples, height, width);
                    PairwiseBenchmark.Run(model, data, sqnr, pairCounts, args.Contains("--rounds"));
                }
            }

            return 0;
        }

        if (args.Contains("--profile-rounding"))
        {
            // Where compensated rounding's added cost goes (RoundingBenchmark.Profile): the OCR classifier and recogniser.
            foreach (var file in new[] { "ch_ppocr_mobile_v2.0_cls_infer.onnx", "ch_PP-OCRv4_rec_infer.onnx" }.Select(f => Path.Combine(ocr, f)).Where(File.Exists))
            {
                var model = OnnxModel.LoadFile(file);
                RoundingBenchmark.Profile(model, SyntheticData(model, samples));
            }

            return 0;
        }

        if (args.Contains("--rounding"))
        {
            // Nearest against compensated rounding on whole searches (RoundingBenchmark): the demo, the OCR classifier and recogniser.
            if (demo is not null)
            {
                var hive = OnnxModel.LoadFile(Path.Combine(demo, "hive-monitor.onnx"));
                RoundingBenchmark.Run(hive, CalibrationSet.Create(DatasetReader.Read(File.ReadAllBytes(Path.Combine(demo, "calibration.npz"))), hive.Inputs));
            }

            // --model NAME keeps the OCR models whose file name contains NAME ("none" runs the demo alone).
            foreach (var file in new[] { "ch_ppocr_mobile_v2.0_cls_infer.onnx", "ch_PP-OCRv4_rec_infer.onnx" }
                .Where(f => Option(args, "--model") is not { } only || f.Contains(only, StringComparison.Ordinal))
                .Select(f => Path.Combine(ocr, f)).Where(File.Exists))
            {
                var model = OnnxModel.LoadFile(file);
                RoundingBenchmark.Run(model, SyntheticData(model, samples));
            }

            return 0;
        }

        var classifier = Path.Combine(ocr, "ch_ppocr_mobile_v2.0_cls_infer.onnx");
        if (File.Exists(classifier))
        {
            var model = OnnxModel.LoadFile(classifier);
            ModelBenchmarks(model, SyntheticData(model, samples), repeat);
        }
        else
        {
            Console.WriteLine($"OCR classifier not found at {classifier}; run scripts/fetch-test-models.sh");
        }

        if (demo is not null)
        {
            var model = OnnxModel.LoadFile(Path.Combine(demo, "hive-monitor.onnx"));
            var data = CalibrationSet.Create(DatasetReader.Read(File.ReadAllBytes(Path.Combine(demo, "calibration.npz"))), model.Inputs);
            ModelBenchmarks(model, data, repeat);

            // The streaming detector: two outputs, a state on axis 1 and a constant sample rate.
            var stream = OnnxModel.LoadFile(Path.Combine(demo, "hive-stream.onnx"));
            var streamData = CalibrationSet.Create(DatasetReader.Read(File.ReadAllBytes(Path.Combine(demo, "stream-calibration.npz"))), stream.Inputs);
            ModelBenchmarks(stream, streamData, repeat);
        }

        KnapsackBenchmark(repeat);
        var process = Process.GetCurrentProcess();
        Console.WriteLine($"peak working set: {process.PeakWorkingSet64 / 1048576.0:0} MiB; managed heap now: {GC.GetTotalMemory(false) / 1048576.0:0} MiB");
        return 0;
    }

    private static void ModelBenchmarks(OnnxModel model, CalibrationSet data, int repeat)
    {
        Console.WriteLine();
        Console.WriteLine($"== {model.Name}: {model.Layers.Count} layers, {model.Layers.Sum(l => l.ParameterCount)} weights, {data.SampleCount} samples");
        using var session = TrialSession.Open(model, data, new TrialSessionOptions());
        var layer = model.Layers[model.Layers.Count / 2];
        var setting = new LayerSetting(4);

        // A plain forward pass: the original model with constant weights, as a deployment would run it.
        using var plain = new InferenceSession(model.BuildWithWeights(new Dictionary<string, float[]>()));
        var plainMs = Timing.MedianMilliseconds(repeat, () => PlainPass(plain, data));
        var asInputsMs = Timing.MedianMilliseconds(repeat, () => session.RunFull(new Dictionary<string, float[]>()));
        Row("forward pass, weights as inputs vs weights as constants", asInputsMs, plainMs);
        var trialMs = Timing.MedianMilliseconds(repeat, () => session.MeasureLayer(layer, setting, allowSuffix: false));
        Row("one trial (quantize, full graph, metrics) vs one plain forward pass", trialMs, plainMs);
        PerOutputMetricsBenchmark(session, layer, setting, trialMs, repeat);

        // Coverage: counting the samples a trial changed is part of every sensitivity trial. Worst case: nothing
        // changed, so every output row is compared to its end.
        var trialOutputs = session.RunFull(new Dictionary<string, float[]> { [layer.Name] = session.Quantized(layer, setting) });
        var countMs = Timing.MedianMilliseconds(repeat, () => SampleChanges.Count(session.ReferenceOutputs, trialOutputs, data.SampleCount));
        SmallRow("counting changed samples (coverage), a changed trial vs one trial", countMs, trialMs);
        var unchangedMs = Timing.MedianMilliseconds(repeat, () => SampleChanges.Count(session.ReferenceOutputs, session.ReferenceOutputs, data.SampleCount));
        SmallRow("counting changed samples, nothing changed (worst case) vs one trial", unchangedMs, trialMs);

        var rebuildMs = Timing.MedianMilliseconds(Math.Max(3, repeat / 2), () =>
        {
            var weight = session.Quantized(layer, setting);
            using var rebuilt = new InferenceSession(model.BuildWithWeights(new Dictionary<string, float[]> { [layer.Name] = weight }));
            PlainPass(rebuilt, data);
        });
        Row("weights-as-inputs trial vs session rebuilt per trial", trialMs, rebuildMs);

        if (session.SuffixAvailable)
        {
            foreach (var late in new[] { model.Layers[model.Layers.Count / 2], model.Layers[^1] }.Distinct())
            {
                var weight = session.Quantized(late, setting);
                var suffixMs = Timing.MedianMilliseconds(repeat, () => session.RunSuffix(late, weight));
                var fullMs = Timing.MedianMilliseconds(repeat, () => session.RunFull(new Dictionary<string, float[]> { [late.Name] = weight }));
                Row($"suffix trial vs full trial (layer '{late.Name}')", suffixMs, fullMs);
            }
        }

        var bits = new[] { 2, 3, 4, 5, 6, 8 };
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), bits);
        var trials = SensitivitySweep.Plan(model.Layers, settings);
        var clock = Stopwatch.StartNew();
        SensitivitySweep.Run(session, trials, new InMemoryTrialStore(), null, CancellationToken.None);
        var sweepMs = clock.Elapsed.TotalMilliseconds;
        Row($"whole sweep ({trials.Count} trials) vs {trials.Count} plain forward passes", sweepMs, trials.Count * plainMs);
        Console.WriteLine($"   session build {session.SessionBuildMilliseconds:0} ms; reference pass {session.ForwardPassMilliseconds:0.0} ms");
    }

    /// <summary>
    /// What computing every metric per output (and pooling the sums) adds to a trial, against computing the
    /// same sums pooled only: the comparison is timed both ways on one trial's outputs, and the difference is
    /// set against the whole trial. Logit space (opt-in) is shown against linear the same way.
    /// </summary>
    private static void PerOutputMetricsBenchmark(TrialSession session, WeightLayer layer, LayerSetting setting, double trialMs, int repeat)
    {
        var outputs = session.RunFull(new Dictionary<string, float[]> { [layer.Name] = session.Quantized(layer, setting) });
        var reference = session.ReferenceOutputs;
        var compareReps = Math.Max(repeat, 25);
        var perOutputMs = Timing.MedianMilliseconds(compareReps, () => OutputComparer.Compare(reference, outputs, null));
        var pooledMs = Timing.MedianMilliseconds(compareReps, () =>
        {
            var sums = default(OutputSums);
            for (var o = 0; o < reference.Count; o++)
            {
                sums = sums.Add(OutputComparer.CompareOutput(reference[o], outputs[o], MetricSpace.Linear));
            }

            GC.KeepAlive(sums.ToMetrics("all"));
        });
        Row($"trial with per-output metrics ({reference.Count} outputs) vs pooled metrics only", trialMs, trialMs - perOutputMs + pooledMs);
        var logitMs = Timing.MedianMilliseconds(compareReps, () => OutputComparer.Compare(reference, outputs, null, MetricSpace.Logit));
        Row("trial with metrics in logit space vs in linear space", trialMs - perOutputMs + logitMs, trialMs);
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"   comparison alone: per-output {perOutputMs:0.000} ms, pooled only {pooledMs:0.000} ms, logit space {logitMs:0.000} ms"));
    }

    internal static void PlainPass(InferenceSession session, CalibrationSet data)
    {
        // Batches as the inputs' sample axes allow, the same rule the trial session follows.
        var fixedBatch = data.SamplesPerRun;
        var batch = fixedBatch ?? Math.Min(32, data.SampleCount);
        using var runOptions = new RunOptions();
        for (var start = 0; start < data.SampleCount; start += batch)
        {
            var count = Math.Min(batch, data.SampleCount - start);
            var values = data.Inputs.Select((a, i) => OrtTensors.SliceSamples(a, data.SampleAxes[i], start, count, fixedBatch ?? count)).ToList();
            using var results = session.Run(runOptions, session.InputNames, values, session.OutputNames);
            values.ForEach(v => v.Dispose());
        }
    }

    /// <summary>
    /// The knapsack on 2,000 synthetic layers x 7 choices: one exact budget query against the greedy on the same
    /// instance (medians over repeats, min and max), at three budgets, and the whole frontier once.
    /// </summary>
    private static void KnapsackBenchmark(int repeat)
    {
        Console.WriteLine();
        var random = new Random(2026);
        var layers = Enumerable.Range(0, 2000).Select(i =>
        {
            var parameters = (long)Math.Exp(random.NextDouble() * Math.Log(1000) + Math.Log(1000));
            var sensitivity = Math.Exp(random.NextDouble() * 6 - 3) * 1e-4;
            return new PlanningLayer($"layer{i}", new[] { 2, 3, 4, 5, 6, 8, 16 }.Select(b =>
                new PlanningChoice(b, CostModel.LayerBytes(parameters, 16, b, QuantizationScheme.Symmetric, Granularity.PerChannel), sensitivity * Math.Pow(4, 8 - Math.Min(b, 8)) / (b == 16 ? 1e3 : 1))).ToList());
        }).ToList();
        var least = layers.Sum(l => l.Choices.Min(c => c.Error));
        foreach (var multiple in new[] { 5.0, 50.0, 500.0 })
        {
            var budget = least * multiple;
            Selection? chosen = null;
            Selection? greedy = null;
            var solve = Timing.Measure(repeat, () => chosen = KnapsackSolver.MinimumBytes(layers, budget));
            var greedyTime = Timing.Measure(repeat, () => greedy = GreedySolver.MinimumBytes(layers, budget));
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"knapsack, 2,000 layers x 7 choices, error <= {multiple}x the least: one exact query {solve} vs greedy {greedyTime}  ratio {solve.Median / greedyTime.Median:0.00}; {chosen?.Bytes} bytes, greedy {greedy!.Bytes / (double)(chosen?.Bytes ?? 1):0.00000}x"));
        }

        FrontierRow("knapsack frontier, 2,000 layers x 7 choices, within the memory setting", () => KnapsackSolver.Frontier(layers));
        FrontierRow("knapsack frontier, the same, capped at 20,000 points per layer", () => KnapsackSolver.Frontier(layers, KnapsackSolver.DefaultMaxPoints));
        var real = layers.Take(300).ToList();
        FrontierRow("knapsack frontier, the first 300 layers, within the memory setting", () => KnapsackSolver.Frontier(real));
    }

    private static void FrontierRow(string what, Func<FrontierResult> solve)
    {
        var clock = Stopwatch.StartNew();
        var frontier = solve();
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"{what}: {frontier.Count} points in {clock.Elapsed.TotalMilliseconds:0} ms, {(frontier.Exact ? "exact" : $"thinned (bytes within {frontier.BytesFactorBound:0.000000}x of exact)")}"));
    }

    private static CalibrationSet SyntheticData(OnnxModel model, int samples, int height = 48, int width = 192)
    {
        // The OCR classifier reads text-line crops; uniform noise in [0, 1) exercises every layer just as well for timing.
        var random = new Random(7);
        var arrays = model.Inputs.Select(input =>
        {
            var shape = input.Shape.Select((d, i) => i == 0 ? samples : d ?? (i == input.Shape.Count - 1 ? width : height)).ToArray();
            var data = new float[shape.Aggregate(1L, (a, b) => a * b)];
            for (var i = 0; i < data.Length; i++)
            {
                data[i] = random.NextSingle();
            }

            return new NpyArray(input.Name, ElementType.Float32, shape, data);
        }).ToList();
        return CalibrationSet.Create(arrays, model.Inputs);
    }

    private static void Row(string what, double ours, double baseline) =>
        Console.WriteLine($"{what,-70} {ours,9:0.00} ms vs {baseline,9:0.00} ms  ratio {ours / baseline:0.00}");

    /// <summary>A row whose first figure is too small for milliseconds: microseconds, and the ratio to four places.</summary>
    private static void SmallRow(string what, double ours, double baseline) =>
        Console.WriteLine($"{what,-70} {ours * 1000,9:0.0} us vs {baseline,9:0.00} ms  ratio {ours / baseline:0.0000}");

    private static string? Option(string[] args, string name)
    {
        var index = Array.IndexOf(args, name);
        return index >= 0 && index + 1 < args.Length ? args[index + 1] : null;
    }

    private static string RuntimeInfo() => System.Runtime.InteropServices.RuntimeInformation.FrameworkDescription;
}
