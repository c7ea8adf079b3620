using System.Globalization;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// What the storage rule cost the search, in one or two sentences: candidate widths that save nothing under
/// container storage, and how much smaller the plan could be if sub-byte widths were packed (<c>--storage packed</c>)
/// or stored as int4 (<c>--target-opset 21</c>). When the search measured widths below 8 bits under an error budget,
/// the packed figure comes from the same sensitivities (the additive model's smallest packed assignment within the
/// budget, not validated); otherwise it is the size of 4 bits (2 bits at opset 21) on every searched layer, whose
/// error this search did not measure.
/// </summary>
internal static class StorageAdvice
{
    /// <summary>Null when nothing smaller is open (packed storage already).</summary>
    public static string? Describe(OnnxModel model, PlanningProblem problem, SearchDecision decision, bool bitsGiven)
    {
        var settings = problem.Settings;
        if (settings.Storage == StorageRule.Packed)
        {
            return null;
        }

        var sentences = new List<string>();
        var opset = problem.Sizer.Opset;
        var useless = CandidateWidths.SavingNothing(settings.Bits, settings.Storage, opset);
        if (bitsGiven && useless.Count > 0)
        {
            sentences.Add($"Width{(useless.Count > 1 ? "s" : string.Empty)} {string.Join(", ", useless)} save{(useless.Count > 1 ? string.Empty : "s")} nothing at opset {opset}: " +
                "stored in the same container as a wider width (one byte each below opset 21; int4 for 2-4 bits and one byte for 5-8 bits at 21), they only add error.");
        }

        if (decision.Chosen is not { } chosen)
        {
            return sentences.Count == 0 ? null : string.Join(" ", sentences);
        }

        var packed = new ModelSizer(model, StorageRule.Packed, opset, problem.Sizer.Activations, problem.Sizer.BiasFileBytes);
        var measuredSmall = problem.Layers.Any(l => l.Choices.Any(c => BitWidths.IsInteger(c.Bits) && c.Bits < BitWidths.MaxInteger));
        if (measuredSmall)
        {
            var fits = PackedFrontierBytes(problem, packed, chosen);
            sentences.Add(fits is { } smaller && smaller < chosen.Bytes
                ? $"With --storage packed (a target that packs sub-byte widths itself), the additive model fits the budget in {Format(smaller)} counted packed (before validation), against {Format(chosen.Bytes)} for this plan."
                : "With --storage packed, the widths measured here give no smaller plan within the budget.");
            return string.Join(" ", sentences);
        }

        // No width below 8 bits was measured: say what the closed widths would weigh, without claiming their error.
        var bits = opset >= WeightStorage.Int4Opset ? 2 : 4;
        var uniform = new LayerSetting(bits, settings.Scheme, settings.Granularity, settings.Clip);
        var fixedBytes = problem.ExcludedBytes + problem.OtherBytes;
        var text = $"Smaller widths are closed by the storage: {bits} bits on every searched layer would take {Format(fixedBytes + problem.Searched.Sum(l => packed.LayerBytes(l, uniform)))} with --storage packed";
        if (opset < WeightStorage.Int4Opset)
        {
            var int4 = new ModelSizer(model, StorageRule.Container, WeightStorage.Int4Opset, problem.Sizer.Activations, problem.Sizer.BiasFileBytes);
            text += $" or {Format(fixedBytes + problem.Searched.Sum(l => int4.LayerBytes(l, uniform)))} stored as int4 with --target-opset 21";
        }

        sentences.Add(text + $", against {Format(chosen.Bytes)} for this plan; this search did not measure their error (give candidate bits such as 2,3,4,6,8 to measure it).");
        return sentences.Count == 0 ? null : string.Join(" ", sentences);
    }

    /// <summary>
    /// The smallest packed-count file whose predicted error is within the error budget (or the chosen plan's predicted
    /// error, when the validation loop steered above the budget), from the measured sensitivities; null for a size
    /// budget or when none fits.
    /// </summary>
    private static long? PackedFrontierBytes(PlanningProblem problem, ModelSizer packed, AssignmentMeasurement chosen)
    {
        if (problem.Settings.Budget is not ErrorBudget budget)
        {
            return null;
        }

        var target = Math.Max(chosen.PredictedAdditive, AdditiveError.LimitToAdditive(budget.Metric, budget.Limit));

        var layers = problem.Layers.Select((layer, i) => new PlanningLayer(
            layer.Name,
            layer.Choices.Select(c => c with { Bytes = packed.LayerBytes(problem.Searched[i], SensitivitySweep.SettingFor(c.Bits, problem.Settings)) }).ToList())).ToList();
        return KnapsackSolver.MinimumBytes(layers, target) is { } smallest
            ? smallest.Bytes + problem.ExcludedBytes + problem.OtherBytes
            : null;
    }

    private static string Format(long bytes) => bytes.ToString("N0", CultureInfo.InvariantCulture) + " B";
}
