using System.Globalization;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// What the storage rule cost the search, in one or two sentences: candidate widths that save nothing under
/// container storage, and how much smaller the plan could be if sub-byte widths were packed (<c>--storage packed</c>)
/// or stored as int4 (<c>--target-opset 21</c>). When the search measured widths below 8 bits, the packed figure
/// comes from the same sensitivities (the smallest packed assignment with the chosen plan's predicted error);
/// otherwise it is the size of 4 bits on every searched layer, whose error this search did not measure.
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

        var packed = new ModelSizer(model, StorageRule.Packed, opset);
        var measuredSmall = problem.Layers.Any(l => l.Choices.Any(c => BitWidths.IsInteger(c.Bits) && c.Bits < BitWidths.MaxInteger));
        if (measuredSmall)
        {
            var layers = problem.Layers.Select((layer, i) => new PlanningLayer(
                layer.Name,
                layer.Choices.Select(c => c with { Bytes = packed.LayerBytes(problem.Searched[i], SensitivitySweep.SettingFor(c.Bits, settings)) }).ToList())).ToList();
            if (KnapsackSolver.MinimumBytes(layers, chosen.PredictedAdditive) is { } smallest)
            {
                var bytes = smallest.Bytes + problem.ExcludedBytes + problem.OtherBytes;
                if (bytes < chosen.Bytes)
                {
                    sentences.Add($"With --storage packed (a target that packs sub-byte widths itself), the same predicted error fits in {Format(bytes)} counted packed, against {Format(chosen.Bytes)} for this plan.");
                }
            }
        }
        else
        {
            var four = new LayerSetting(4, settings.Scheme, settings.Granularity, settings.Clip);
            var packedFour = problem.ExcludedBytes + problem.OtherBytes + problem.Searched.Sum(l => packed.LayerBytes(l, four));
            var text = $"Smaller widths are closed by the storage: 4 bits on every searched layer would take {Format(packedFour)} with --storage packed";
            if (opset < WeightStorage.Int4Opset)
            {
                var int4 = new ModelSizer(model, StorageRule.Container, WeightStorage.Int4Opset);
                var int4Four = problem.ExcludedBytes + problem.OtherBytes + problem.Searched.Sum(l => int4.LayerBytes(l, four));
                text += $" or {Format(int4Four)} stored as int4 with --target-opset 21";
            }

            sentences.Add(text + $", against {Format(chosen.Bytes)} for this plan; this search did not measure their error (give --bits 2,3,4,6,8 to measure it).");
        }

        return sentences.Count == 0 ? null : string.Join(" ", sentences);
    }

    private static string Format(long bytes) => bytes.ToString("N0", CultureInfo.InvariantCulture) + " B";
}
