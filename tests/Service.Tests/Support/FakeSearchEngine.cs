using System.Collections.Concurrent;
using System.Globalization;
using System.Security.Cryptography;
using System.Text;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Engine;

namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// A deterministic stand-in for the engine. Models and datasets are small text files (see <see cref="Model"/>
/// and <see cref="Dataset"/>); a search measures one trial per layer and bit width through the given
/// <see cref="ITrialStore"/>, skipping stored keys exactly as the engine must, so the service's idempotency is
/// really exercised. A layer's SQNR at b bits follows the 6.02 dB-per-bit rule (common practice) plus a
/// per-layer offset, so results depend on the settings.
/// </summary>
internal sealed class FakeSearchEngine : ISearchEngine
{
    public const string ModelMagic = "FAKE-ONNX";
    public const string DatasetMagic = "FAKE-NPZ";

    private readonly ConcurrentDictionary<string, Hold> holds = new(StringComparer.Ordinal);

    /// <summary>Every trial key this engine measured (not loaded from the store), per model name.</summary>
    public ConcurrentDictionary<string, ConcurrentQueue<string>> Measured { get; } = new(StringComparer.Ordinal);

    /// <summary>How many times RunSearch started, per model name.</summary>
    public ConcurrentDictionary<string, int> Runs { get; } = new(StringComparer.Ordinal);

    /// <summary>The settings each run received, per model name (last run wins).</summary>
    public ConcurrentDictionary<string, SearchSettings> Settings { get; } = new(StringComparer.Ordinal);

    /// <summary>
    /// A fake model: "layer NAME OP PARAMETERS" lines; options: "opset N", "quantized" (refused as already
    /// quantized), "fail CODE" (RunSearch throws a non-retryable EngineException), "crash" (RunSearch throws
    /// a plain exception), "disk-full-once" (the first run throws SQLite's "database or disk is full" after the sweep).
    /// </summary>
    public static byte[] Model(string tag, int opset = 13, string input = "image", IEnumerable<string>? layers = null, params string[] options)
    {
        var text = new StringBuilder($"{ModelMagic}\ntag {tag}\nopset {opset}\ninput {input}\n");
        foreach (var layer in layers ?? ["conv1 Conv 864", "conv2 Conv 18432", "fc Gemm 10240"])
        {
            text.Append("layer ").Append(layer).Append('\n');
        }

        foreach (var option in options)
        {
            text.Append(option).Append('\n');
        }

        return Encoding.UTF8.GetBytes(text.ToString());
    }

    /// <summary>A fake dataset feeding the named input with the given number of samples.</summary>
    public static byte[] Dataset(string tag, string input = "image", int samples = 8, bool labels = false) =>
        Encoding.UTF8.GetBytes($"{DatasetMagic}\ntag {tag}\ninput {input}\nsamples {samples}\n{(labels ? "labels\n" : "")}");

    /// <summary>Makes the next run for this model stop after its first sweep trial until released (or canceled).</summary>
    public Hold HoldRun(string modelName) => holds.GetOrAdd(modelName, _ => new Hold());

    public ModelSummary InspectModel(byte[] bytes, string name)
    {
        var lines = Lines(bytes, ModelMagic, "model-not-onnx", "The upload is not an ONNX model.");
        if (lines.Contains("quantized"))
        {
            throw new EngineException("model-already-quantized", "The model already holds QuantizeLinear/DequantizeLinear nodes; upload the FP32 model.");
        }

        var layers = lines.Where(l => l.StartsWith("layer ", StringComparison.Ordinal))
            .Select(l => l.Split(' '))
            .Select(p => new LayerSummary(p[1], p[2], p[1] + ".weight", [long.Parse(p[3], CultureInfo.InvariantCulture)], long.Parse(p[3], CultureInfo.InvariantCulture), 0, false))
            .ToList();
        if (layers.Count == 0)
        {
            throw new EngineException("model-no-layers", "The model has no Conv, ConvTranspose, Gemm or MatMul with a constant weight.");
        }

        var input = Value(lines, "input");
        return new ModelSummary(
            Convert.ToHexStringLower(SHA256.HashData(bytes)),
            name,
            bytes.Length,
            long.Parse(Value(lines, "opset"), CultureInfo.InvariantCulture),
            [new TensorSummary(input, "float32", [null, 3, 32, 32])],
            [new TensorSummary("logits", "float32", [null, 10])],
            layers,
            []);
    }

    public DatasetSummary InspectDataset(Stream dataset)
    {
        var bytes = ReadAll(dataset);
        var lines = Lines(bytes, DatasetMagic, "dataset-invalid", "The upload is neither a .npz archive nor a .npy array.");
        var samples = long.Parse(Value(lines, "samples"), CultureInfo.InvariantCulture);
        var hasLabels = lines.Contains("labels");
        List<ArraySummary> arrays = [new ArraySummary(Value(lines, "input"), "<f4", [samples, 3, 32, 32])];
        if (hasLabels)
        {
            arrays.Add(new ArraySummary("labels", "<i8", [samples]));
        }

        return new DatasetSummary(Convert.ToHexStringLower(SHA256.HashData(bytes)), arrays, samples, hasLabels);
    }

    public void CheckCompatible(byte[] model, Stream dataset, long? targetOpset = null, IReadOnlyDictionary<string, int>? sampleAxes = null, bool inputMoments = false)
    {
        var modelInput = Value(Lines(model, ModelMagic, "model-not-onnx", "Not a model."), "input");
        var datasetInput = Value(Lines(ReadAll(dataset), DatasetMagic, "dataset-invalid", "Not a dataset."), "input");
        if (modelInput != datasetInput)
        {
            throw new EngineException("dataset-mismatch", $"The model's input '{modelInput}' has no array in the dataset (it holds '{datasetInput}').");
        }
    }

    public SearchResult RunSearch(
        byte[] model,
        string modelName,
        byte[] dataset,
        SearchSettings settings,
        ITrialStore trials,
        IProgress<SearchProgress> progress,
        CancellationToken cancellationToken,
        byte[]? holdout = null)
    {
        // No bits given: the real engine takes the widths its storage tells apart at the model's opset; this fake has
        // no opset and takes the packed default list, whose trial counts the job tests are written against.
        if (settings.Bits.Count == 0)
        {
            settings = settings with { Bits = SearchSettings.DefaultBits };
        }

        Runs.AddOrUpdate(modelName, 1, (_, n) => n + 1);
        Settings[modelName] = settings;
        var measured = Measured.GetOrAdd(modelName, _ => new ConcurrentQueue<string>());
        var lines = Lines(model, ModelMagic, "model-not-onnx", "Not a model.");
        var layers = InspectModel(model, modelName).Layers.Where(l => settings.Excluded?.Contains(l.Name) != true).ToList();
        var stored = trials.LoadAll();

        void Measure(string key, string kind, string? layer, int? bits, double sqnr)
        {
            if (stored.ContainsKey(key))
            {
                return;
            }

            measured.Enqueue(key);
            trials.Save(new TrialRecord(key, kind, layer, bits, kind == "validation" ? key[(key.IndexOf('/') + 1)..] : null, Metrics(sqnr), 2.0 + (bits ?? 0)));
        }

        progress.Report(new SearchProgress(SearchStage.Reference, 0, 1));
        Measure("reference", "reference", null, null, double.PositiveInfinity);
        progress.Report(new SearchProgress(SearchStage.Reference, 1, 1));

        var sweep = layers.SelectMany(l => settings.Bits.Select(b => (Layer: l, Bits: b))).ToList();
        progress.Report(new SearchProgress(SearchStage.Sweep, 0, sweep.Count));
        for (var i = 0; i < sweep.Count; i++)
        {
            cancellationToken.ThrowIfCancellationRequested();
            var (layer, bits) = sweep[i];
            Measure($"sensitivity/{layer.Name}/{bits}/{settings.Scheme}", "sensitivity", layer.Name, bits, Sqnr(layer.Name, bits));
            progress.Report(new SearchProgress(SearchStage.Sweep, i + 1, sweep.Count));
            if (i == 0 && holds.TryRemove(modelName, out var hold))
            {
                hold.Started.TrySetResult();
                try
                {
                    hold.Gate.Wait(cancellationToken);
                }
                catch (OperationCanceledException)
                {
                    hold.Canceled.TrySetResult();
                    throw;
                }
            }
        }

        if (lines.FirstOrDefault(l => l.StartsWith("fail ", StringComparison.Ordinal)) is { } fail)
        {
            throw new EngineException(fail[5..], "Even 8 bits everywhere cannot run this model on the calibration set.");
        }

        if (lines.Contains("disk-full-once") && Runs[modelName] == 1)
        {
            // What Microsoft.Data.Sqlite throws when a write meets a full disk: SQLITE_FULL, result code 13 (sqlite.org/rescode.html).
            throw new Microsoft.Data.Sqlite.SqliteException("SQLite Error 13: 'database or disk is full'.", 13);
        }

        if (lines.Contains("crash"))
        {
            throw new InvalidOperationException("The fake engine crashed on purpose.");
        }

        progress.Report(new SearchProgress(SearchStage.Search, 0, 1));
        var limit = settings.Budget is ErrorBudget { Metric: BudgetMetric.Sqnr } error ? error.Limit : 0;
        var choice = layers.ToDictionary(
            l => l.Name,
            l => settings.Pins?.TryGetValue(l.Name, out var pinned) == true
                ? pinned
                : settings.Bits.Order().FirstOrDefault(b => Sqnr(l.Name, b) >= limit, -1));
        var feasible = choice.Values.All(b => b > 0);
        var assignment = string.Join(",", choice.Select(kv => $"{kv.Key}={kv.Value}"));
        var hash = Convert.ToHexStringLower(SHA256.HashData(Encoding.UTF8.GetBytes(assignment)));
        var predicted = feasible ? choice.Min(kv => Sqnr(kv.Key, kv.Value)) : 0;
        progress.Report(new SearchProgress(SearchStage.Validate, 0, 1));
        Measure($"validation/{hash}", "validation", null, null, predicted - 0.5);
        progress.Report(new SearchProgress(SearchStage.Export, 1, 1));

        var bytes = feasible ? layers.Sum(l => l.Parameters * choice[l.Name] / 8) : 0;
        var fp32 = layers.Sum(l => l.Parameters * 4);
        var csv = new StringBuilder("layer,bits,sqnrDb\n");
        foreach (var (layer, bits) in sweep)
        {
            csv.Append(CultureInfo.InvariantCulture, $"{layer.Name},{bits},{Sqnr(layer.Name, bits):F2}\n");
        }

        var manifest = $"{{\"schemaVersion\":1,\"model\":\"{modelName}\",\"assignment\":\"{assignment}\"}}";
        return new SearchResult(
            feasible,
            feasible ? $"Chosen assignment {assignment} keeps SQNR at {predicted:F1} dB." : $"Even {settings.Bits.Max()} bits everywhere misses {limit} dB.",
            Encoding.UTF8.GetBytes(manifest),
            feasible ? [.. model, .. Encoding.UTF8.GetBytes("quantized " + assignment)] : null,
            csv.ToString(),
            $"[{{\"bytes\":{bytes},\"sqnr\":{predicted.ToString(CultureInfo.InvariantCulture)}}}]",
            bytes,
            feasible ? layers.Sum(l => l.Parameters * choice[l.Name]) / (double)layers.Sum(l => l.Parameters) : 0,
            feasible ? fp32 / (double)bytes : 0,
            predicted,
            predicted - 0.5,
            trials.LoadAll().Count);
    }

    public IReadOnlyList<LayerTrials> PlanSweep(byte[] model, string modelName, SearchSettings settings) =>
        InspectModel(model, modelName).Layers
            .Where(l => settings.Excluded?.Contains(l.Name) != true)
            .Select(l => new LayerTrials(l.Name, (settings.Bits.Count == 0 ? SearchSettings.DefaultBits : settings.Bits).Count))
            .ToList();

    /// <summary>Measures the sensitivity trials of <paramref name="layers"/> under the keys <see cref="RunSearch"/> uses, so it finds them stored.</summary>
    public void SweepLayers(byte[] model, string modelName, byte[] dataset, SearchSettings settings, IReadOnlyCollection<string> layers, ITrialStore trials, CancellationToken cancellationToken)
    {
        var bits = settings.Bits.Count == 0 ? SearchSettings.DefaultBits : settings.Bits;
        var measured = Measured.GetOrAdd(modelName, _ => new ConcurrentQueue<string>());
        trials.Save(new TrialRecord("reference", "reference", null, null, null, Metrics(double.PositiveInfinity), 2.0));
        foreach (var layer in layers)
        {
            foreach (var b in bits)
            {
                cancellationToken.ThrowIfCancellationRequested();
                var key = $"sensitivity/{layer}/{b}/{settings.Scheme}";
                measured.Enqueue(key);
                trials.Save(new TrialRecord(key, "sensitivity", layer, b, null, Metrics(Sqnr(layer, b)), 2.0 + b));
            }
        }
    }

    /// <summary>6.02 dB per bit (common practice) plus a fixed offset per layer name.</summary>
    public static double Sqnr(string layer, int bits) => (6.02 * bits) + (layer.Length % 5);

    private static MetricSet Metrics(double sqnr) =>
        new(double.IsPositiveInfinity(sqnr) ? 0 : Math.Pow(10, -sqnr / 10), sqnr, 1, 0, 1, null);

    private static List<string> Lines(byte[] bytes, string magic, string code, string message)
    {
        var text = Encoding.UTF8.GetString(bytes);
        if (!text.StartsWith(magic + "\n", StringComparison.Ordinal))
        {
            throw new EngineException(code, message);
        }

        return [.. text.Split('\n', StringSplitOptions.RemoveEmptyEntries)];
    }

    private static string Value(List<string> lines, string name) =>
        lines.First(l => l.StartsWith(name + " ", StringComparison.Ordinal))[(name.Length + 1)..];

    /// <summary>A run paused after its first sweep trial.</summary>
    public sealed class Hold
    {
        public TaskCompletionSource Started { get; } = new(TaskCreationOptions.RunContinuationsAsynchronously);

        public ManualResetEventSlim Gate { get; } = new(false);

        /// <summary>Completes when the run's cancellation token freed it from the gate.</summary>
        public TaskCompletionSource Canceled { get; } = new(TaskCreationOptions.RunContinuationsAsynchronously);

        public void Release() => Gate.Set();
    }

    private static byte[] ReadAll(Stream stream)
    {
        using var copy = new MemoryStream();
        stream.CopyTo(copy);
        return copy.ToArray();
    }
}
