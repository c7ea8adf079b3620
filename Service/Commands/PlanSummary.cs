using System.Globalization;
using System.Text;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Planning;

namespace Bitbudget.Service.Commands;

/// <summary>
/// The summary <c>plan</c> prints: the layer table (every count with thousands separators, sizes in bytes), a
/// legend for the marks in the bits column, the totals, the budget metric with its unit, the held-out check,
/// the outcome, notes and warnings.
/// </summary>
internal static class PlanSummary
{
    private static readonly CultureInfo C = CultureInfo.InvariantCulture;

    public static string Write(AssignmentManifest manifest, SearchResult result, Budget budget)
    {
        var text = new StringBuilder();
        if (manifest.Model.OpsetRaise is { } raise)
        {
            var agreement = raise.BitExact ? "bit for bit equal" : $"within {raise.RelativeDifference:0.##E+0} relative";
            text.AppendLine(C, $"opset raised from {raise.From} to {raise.To}: {raise.Rewritten.Count} nodes rewritten; ONNX Runtime outputs on the calibration set {agreement}");
        }

        LayerTable(text, manifest);
        var metric = budget switch { ErrorBudget error => error.Metric, SizeBudget size => size.Metric, _ => BudgetMetric.Sqnr };
        var metricName = MetricValues.Name(metric);
        if (manifest.Totals is { } totals)
        {
            var counted = totals.Storage == "packed" ? "counted packed" : "predicted file";
            text.AppendLine(C, $"total: {Count(totals.Bytes)} bytes {counted} (FP32 file {Count(totals.Float32Bytes)} bytes), {totals.AverageBits:0.00} bits per weight");
            if (totals.ModelFileBytes is { } written)
            {
                text.AppendLine(C, $"written: model.quantized.onnx {Count(written)} bytes, {totals.Compression:0.00}x smaller than the FP32 file");
            }

            text.AppendLine(C, $"{metricName}: predicted {MetricValues.Format(metric, result.PredictedError)}, measured {MetricValues.Format(metric, result.MeasuredError)}{Binding(totals.BindingOutput)}");
            Validation(text, manifest, metric);
            Outputs(text, totals.Metrics, manifest.HeldOut?.Metrics);
            if (manifest.HeldOut is { } held)
            {
                var verdict = held.MeetsBudget switch { true => "meets the budget", false => "MISSES the budget", null => "no error budget to meet" };
                var heldValue = held.Measured is { } v ? MetricValues.Format(metric, v) : "not measured";
                text.AppendLine(C, $"{metricName}: calibration ({Count(manifest.Dataset.Samples)} samples) {MetricValues.Format(metric, result.MeasuredError)}, held-out ({Count(held.Samples)} samples) {heldValue}{Binding(held.BindingOutput)}: {verdict}");
            }
        }

        text.AppendLine(result.Message);
        if (result.StorageNote is { } note)
        {
            text.AppendLine(note);
        }

        foreach (var warning in result.Warnings ?? [])
        {
            text.AppendLine(C, $"warning: {warning}");
        }

        if (manifest.Skipped is { Count: > 0 } skipped)
        {
            text.AppendLine(C, $"skipped: {skipped.Count} weights stay FP32 ({Count(skipped.Sum(s => s.Parameters))} parameters), e.g. {skipped[0].Reason} (all in manifest.json, \"skipped\")");
        }

        return text.ToString();
    }

    private static void LayerTable(StringBuilder text, AssignmentManifest manifest)
    {
        const string ExcludedMark = "fp32*", NotExercisedMark = "!", NoneMark = "-";
        var rows = manifest.Layers.Select(layer =>
        {
            var bits = layer.Excluded ? ExcludedMark : layer.Bits?.ToString(C) ?? NoneMark;

            // A layer kept at its highest width because the calibration set does not (or barely) reach it.
            bits += layer.Coverage?.Reason is null ? string.Empty : NotExercisedMark;
            return new[] { layer.Name, layer.Op, Count(layer.Parameters), bits, Count(layer.Bytes) };
        }).ToList();
        string[] header = ["layer", "op", "parameters", "bits", "size (bytes)"];
        var widths = header.Select((h, i) => rows.Select(r => r[i].Length).Append(h.Length).Max()).ToArray();
        string Row(string[] cells) => string.Join("  ", cells.Select((cell, i) => i < 2 ? cell.PadRight(widths[i]) : cell.PadLeft(widths[i]))).TrimEnd();
        text.AppendLine(Row(header));
        foreach (var row in rows)
        {
            text.AppendLine(Row(row));
        }

        var marks = rows.Select(r => r[3]).ToList();
        var legend = new List<string>();
        if (marks.Any(m => m.StartsWith(ExcludedMark, StringComparison.Ordinal)))
        {
            legend.Add($"{ExcludedMark} excluded (--exclude), kept FP32");
        }

        if (marks.Any(m => m.EndsWith(NotExercisedMark, StringComparison.Ordinal)))
        {
            legend.Add($"{NotExercisedMark} not exercised by the calibration set, kept at its highest width (see the warnings)");
        }

        if (marks.Contains(NoneMark))
        {
            legend.Add($"{NoneMark} no width chosen (the budget cannot be met)");
        }

        if (legend.Count > 0)
        {
            text.AppendLine("bits: " + string.Join("; ", legend));
        }
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
        text.AppendLine(C, $"{"output".PadRight(width)}  {"judged",6} {"SQNR (dB)",10}{(heldOut is null ? "" : $" {"held-out (dB)",13}")}");
        foreach (var output in outputs)
        {
            var held = heldOut?.Outputs?.FirstOrDefault(o => o.Name == output.Name);
            text.AppendLine(C, $"{output.Name.PadRight(width)}  {(output.Judged ? "yes" : "no"),6} {Decibels(output.SqnrDb),10}{(heldOut is null ? "" : $" {Decibels(held?.SqnrDb),13}")}");
        }
    }

    /// <summary>How many assignments the validation measured and how far the first one chosen landed from its prediction.</summary>
    private static void Validation(StringBuilder text, AssignmentManifest manifest, BudgetMetric metric)
    {
        if (manifest.Outcome.Rounds is not { Count: > 1 } rounds)
        {
            return;
        }

        var first = rounds[1];
        var pairs = manifest.Outcome.Pairs is { Count: > 0 } measured ? $", {measured.Count} pair trials" : string.Empty;
        var corrected = first.PredictedWithPairs is { } withPairs ? $" ({MetricValues.Format(metric, withPairs)} with pair terms)" : string.Empty;
        text.AppendLine(C, $"validation: {rounds.Count} assignments measured{pairs}; the first chosen was predicted at {MetricValues.Format(metric, first.Predicted)}{corrected}, measured {MetricValues.Format(metric, first.Measured)}");
    }

    private static string Binding(string? output) => output is null ? string.Empty : $" (worst judged output: '{output}')";

    private static string Count(long value) => value.ToString("N0", C);

    // An infinite SQNR is no error at all; null is a figure that was not measured.
    private static string Decibels(double? value) => value switch
    {
        null => "-",
        double.PositiveInfinity => "inf",
        { } v => v.ToString("0.0", C),
    };
}
