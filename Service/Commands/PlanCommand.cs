using System.Globalization;
using System.Text;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Service.Commands;

/// <summary>
/// <c>plan --model M.onnx --data D.npz --budget "sqnr&gt;=30" [--bits 2,3,4,6,8] [--method knapsack|greedy]
/// [--scheme symmetric|asymmetric] [--granularity per-channel|per-tensor] [--clip min-max|percentile|mse-optimal|analytic-laplace|analytic-gaussian]
/// [--pin LAYER=BITS]... [--exclude LAYER]... [--activations] [--target-opset N] [--sample-axis INPUT=AXIS]... [--outputs A,B]
/// [--metric-space linear|logit] [--holdout H.npz] [--storage container|packed] [--no-cache] [--max-sweep-memory BYTES] [--out DIR]</c>: the whole search locally, writing the
/// manifest, the quantized model, the sensitivity CSV and the frontier into DIR. Sensitivity trials are read from and
/// written to the user's trial cache (<see cref="TrialCache"/>) unless <c>--no-cache</c> is given.
/// </summary>
internal static class PlanCommand
{
    private const string Usage =
        "usage: plan --model M.onnx --data D.npz --budget \"sqnr>=30\" [--bits 2,3,4,6,8] [--method knapsack|greedy] " +
        "[--scheme symmetric|asymmetric] [--granularity per-channel|per-tensor] [--clip min-max|percentile|mse-optimal|analytic-laplace|analytic-gaussian] " +
        "[--pin LAYER=BITS]... [--exclude LAYER]... [--activations] [--target-opset N] [--sample-axis INPUT=AXIS]... [--outputs A,B] " +
        "[--metric-space linear|logit] [--holdout H.npz] [--storage container|packed] [--no-cache] [--max-sweep-memory BYTES] [--out DIR]";

    public static Task<int> RunAsync(string[] args)
    {
        PlanArguments parsed;
        try
        {
            parsed = PlanArguments.Parse(args);
        }
        catch (Exception e) when (e is ArgumentException or EngineException)
        {
            Console.Error.WriteLine($"error: {e.Message}");
            Console.Error.WriteLine(Usage);
            return Task.FromResult(2);
        }

        try
        {
            return Task.FromResult(Run(parsed));
        }
        catch (EngineException e)
        {
            Console.Error.WriteLine($"error: {e.Message}");
            return Task.FromResult(1);
        }
        catch (IOException e)
        {
            Console.Error.WriteLine($"error: {e.Message}");
            return Task.FromResult(1);
        }
    }

    private static int Run(PlanArguments args)
    {
        var model = OnnxModel.LoadFile(args.Model, args.Settings.TargetOpset);
        var dataBytes = File.ReadAllBytes(args.Data);
        var data = CalibrationSet.Create(DatasetReader.Read(dataBytes), model.Inputs, args.Settings.SampleAxes);
        var holdout = args.Holdout is null ? null : CalibrationSet.Create(DatasetReader.Read(File.ReadAllBytes(args.Holdout)), model.Inputs, args.Settings.SampleAxes);
        var sessionOptions = new TrialSessionOptions(MaxSweepMemoryBytes: args.MaxSweepMemoryBytes);
        var store = args.NoCache
            ? TrialCache.Off()
            : TrialCache.Open(TrialCache.Folder(), TrialContext.Of(TrialContext.HashBytes(File.ReadAllBytes(args.Model)), TrialContext.HashBytes(dataBytes), args.Settings, sessionOptions));
        var clock = System.Diagnostics.Stopwatch.StartNew();
        var result = SearchRunner.Run(model, data, args.Settings, store, new TerminalProgress(), CancellationToken.None, sessionOptions, holdout);
        Console.Error.WriteLine();

        Directory.CreateDirectory(args.Out);
        File.WriteAllBytes(Path.Combine(args.Out, "manifest.json"), result.ManifestJson);
        File.WriteAllText(Path.Combine(args.Out, "sensitivity.csv"), result.SensitivityCsv);
        File.WriteAllText(Path.Combine(args.Out, "frontier.json"), result.FrontierJson);
        File.WriteAllBytes(Path.Combine(args.Out, "trials.json"), ManifestJson.Serialize(Trials(store)));
        if (result.QuantizedModel is { } quantized)
        {
            File.WriteAllBytes(Path.Combine(args.Out, "model.quantized.onnx"), quantized);
        }

        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        Console.Out.Write(Summary(manifest, result));
        var reused = store.Reused > 0 ? $" ({store.Reused} sensitivity trials reused from the trial cache {store.File})" : string.Empty;
        Console.Out.WriteLine($"{result.TrialCount} trials{reused} in {clock.Elapsed.TotalSeconds:0.0} s; artifacts in {Path.GetFullPath(args.Out)}");
        if (result.SweepNote is { } sweep)
        {
            Console.Out.WriteLine($"sweep: {sweep}");
        }

        if (store.Problem is { } problem)
        {
            Console.Error.WriteLine($"warning: {problem}");
        }

        return result.Feasible ? 0 : 3;
    }

    /// <summary>
    /// The stored trials in key order, each as one item of the API's trial pages (GET /v1/searches/{id}/trials):
    /// key, kind, metrics, duration and the assignment it measured.
    /// </summary>
    private static List<TrialRecord> Trials(ITrialStore store) =>
        store.LoadAll().Values.OrderBy(t => t.Key, StringComparer.Ordinal).ToList();

    private static string Summary(AssignmentManifest manifest, SearchResult result)
    {
        var text = new StringBuilder();
        if (manifest.Model.OpsetRaise is { } raise)
        {
            var agreement = raise.BitExact ? "bit for bit equal" : $"within {raise.RelativeDifference:0.##E+0} relative";
            text.AppendLine(CultureInfo.InvariantCulture, $"opset raised from {raise.From} to {raise.To}: {raise.Rewritten.Count} nodes rewritten; ONNX Runtime outputs on the calibration set {agreement}");
        }

        var width = Math.Max(5, manifest.Layers.Max(l => l.Name.Length));
        text.AppendLine(CultureInfo.InvariantCulture, $"{"layer".PadRight(width)}  {"op",-13} {"params",10} {"bits",5} {"bytes",10}");
        foreach (var layer in manifest.Layers)
        {
            var bits = layer.Excluded ? "fp32*" : layer.Bits?.ToString(CultureInfo.InvariantCulture) ?? "-";

            // "!" marks a layer kept at its highest width because the calibration set does not (or barely) reach it.
            bits += layer.Coverage?.Reason is null ? string.Empty : "!";
            text.AppendLine(CultureInfo.InvariantCulture, $"{layer.Name.PadRight(width)}  {layer.Op,-13} {layer.Parameters,10} {bits,5} {layer.Bytes,10}");
        }

        if (manifest.Totals is { } totals)
        {
            var counted = totals.Storage == "packed" ? "counted packed" : "predicted file";
            text.AppendLine(CultureInfo.InvariantCulture, $"total: {totals.Bytes} bytes {counted} (FP32 file {totals.Float32Bytes}), {totals.AverageBits:0.00} bits per weight");
            if (totals.ModelFileBytes is { } written)
            {
                text.AppendLine(CultureInfo.InvariantCulture, $"written: model.quantized.onnx {written} bytes, {totals.Compression:0.00}x smaller than the FP32 file");
            }

            text.AppendLine(CultureInfo.InvariantCulture, $"{manifest.Budget.Metric}: predicted {result.PredictedError:0.####}, measured {result.MeasuredError:0.####}{Binding(totals.BindingOutput)}");
            Outputs(text, totals.Metrics, manifest.HeldOut?.Metrics);
            if (manifest.HeldOut is { } held)
            {
                var verdict = held.MeetsBudget switch { true => "meets the budget", false => "MISSES the budget", null => "no error budget to meet" };
                text.AppendLine(CultureInfo.InvariantCulture, $"{manifest.Budget.Metric}: calibration ({manifest.Dataset.Samples} samples) {result.MeasuredError:0.####}, held-out ({held.Samples} samples) {Number(held.Measured)}{Binding(held.BindingOutput)}: {verdict}");
            }
        }

        text.AppendLine(result.Message);
        if (result.StorageNote is { } note)
        {
            text.AppendLine(note);
        }

        foreach (var warning in result.Warnings ?? [])
        {
            text.AppendLine(CultureInfo.InvariantCulture, $"warning: {warning}");
        }

        if (manifest.Skipped is { Count: > 0 } skipped)
        {
            text.AppendLine(CultureInfo.InvariantCulture, $"skipped: {skipped.Count} weights stay FP32 ({skipped.Sum(s => s.Parameters)} parameters), e.g. {skipped[0].Reason} (all in manifest.json, \"skipped\")");
        }

        return text.ToString();
    }

    /// <summary>One line per output: SQNR on the calibration set (and the held-out set), and whether the budget judges it.</summary>
    private static void Outputs(StringBuilder text, ManifestMetrics calibration, ManifestMetrics? heldOut)
    {
        var outputs = calibration.Outputs ?? [];
        if (outputs.Count < 2 && heldOut is null)
        {
            return;
        }

        var width = Math.Max(6, outputs.Max(o => o.Name.Length));
        text.AppendLine(CultureInfo.InvariantCulture, $"{"output".PadRight(width)}  {"judged",6} {"SQNR dB",9}{(heldOut is null ? "" : $" {"held-out",9}")}");
        foreach (var output in outputs)
        {
            var held = heldOut?.Outputs?.FirstOrDefault(o => o.Name == output.Name);
            text.AppendLine(CultureInfo.InvariantCulture, $"{output.Name.PadRight(width)}  {(output.Judged ? "yes" : "no"),6} {Number(output.SqnrDb),9}{(heldOut is null ? "" : $" {Number(held?.SqnrDb),9}")}");
        }
    }

    private static string Binding(string? output) => output is null ? string.Empty : $" (worst judged output: '{output}')";

    // An infinite SQNR (no error at all) is stored as null.
    private static string Number(double? value) => value is { } v ? v.ToString("0.####", CultureInfo.InvariantCulture) : "-";

    /// <summary>A one-line progress bar on standard error.</summary>
    private sealed class TerminalProgress : IProgress<SearchProgress>
    {
        public void Report(SearchProgress value)
        {
            const int Width = 30;
            var filled = value.Total == 0 ? Width : value.Done * Width / value.Total;
            var stage = value.Stage.ToString().ToLowerInvariant();
            Console.Error.Write($"\r{stage,-9} [{new string('#', filled)}{new string('.', Width - filled)}] {value.Done}/{value.Total}   ");
        }
    }
}
