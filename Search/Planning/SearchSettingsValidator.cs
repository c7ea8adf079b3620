using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>Checks a search's settings against the model and dataset before any work is done.</summary>
public static class SearchSettingsValidator
{
    /// <summary>Throws <see cref="EngineException"/> (code <c>settings-invalid</c>) naming the first problem found.</summary>
    public static void Validate(OnnxModel model, CalibrationSet data, SearchSettings settings)
    {
        if (settings.Bits.Count == 0)
        {
            Fail("The list of candidate bit widths is empty; give at least one of 2..8, 16 (FP16) or 32 (keep FP32).");
        }

        foreach (var bits in settings.Bits.Where(b => !BitWidths.IsValid(b)))
        {
            Fail($"Bit width {bits} is not supported; candidates are 2..8, 16 (FP16) and 32 (keep FP32).");
        }

        if (settings.Pairs is < 0 or > SearchSettings.MaxPairs)
        {
            Fail($"{settings.Pairs} pairs is out of range; give 0 (pair terms off) to {SearchSettings.MaxPairs}.");
        }

        var names = model.Layers.Select(l => l.Name).ToHashSet(StringComparer.Ordinal);
        foreach (var (layer, bits) in settings.Pins ?? new Dictionary<string, int>())
        {
            if (!names.Contains(layer))
            {
                Fail($"Pinned layer '{layer}' is not a layer of the model; see the model's layer list for names.");
            }

            if (!BitWidths.IsValid(bits))
            {
                Fail($"Layer '{layer}' is pinned to {bits} bits; pins take 2..8, 16 or 32.");
            }
        }

        foreach (var layer in (settings.Excluded ?? []).Where(l => !names.Contains(l)))
        {
            Fail($"Excluded layer '{layer}' is not a layer of the model; see the model's layer list for names.");
        }

        if (settings.TargetOpset is { } target && (model.Raise is null || model.Opset != target))
        {
            Fail($"The search asks for opset {target}, but the model was loaded at opset {model.Opset}; load it with the target opset (OnnxModel.Load(bytes, name, {target})).");
        }

        var outputNames = model.Outputs.Select(o => o.Name).ToList();
        foreach (var output in (settings.Outputs ?? []).Where(o => !outputNames.Contains(o, StringComparer.Ordinal)))
        {
            Fail($"Output '{output}' is not an output of the model; its outputs are: {string.Join(", ", outputNames)}.");
        }

        if (settings.Outputs is { } judged && judged.Distinct(StringComparer.Ordinal).Count() != judged.Count)
        {
            Fail("The list of judged outputs names the same output twice.");
        }

        if (settings.QuantizeActivations)
        {
            if (model.Opset < ActivationQuantization.MinimumOpset)
            {
                Fail(ActivationQuantization.OpsetMessage(model.Opset));
            }

            // An input read inside an If/Loop/Scan body cannot be tapped from the main graph for calibration.
            var mainNodes = model.Proto.Graph.Node.Select(n => n.Name).ToHashSet(StringComparer.Ordinal);
            var excludedNames = (settings.Excluded ?? []).ToHashSet(StringComparer.Ordinal);
            foreach (var layer in model.Layers.Where(l => !excludedNames.Contains(l.Name)))
            {
                if (layer.Consumers.FirstOrDefault(c => !mainNodes.Contains(c)) is { } inner)
                {
                    Fail($"Layer '{layer.Name}' is read by '{inner}' inside an If/Loop/Scan body, whose input activation cannot be quantized; exclude the layer or search weights only.");
                }
            }
        }

        switch (settings.Budget)
        {
            case ErrorBudget { Metric: BudgetMetric.AccuracyDrop } when data.Labels is null:
                Fail("An accuracy-drop budget needs class labels: add an integer array named 'labels' to the dataset.");
                break;
            case ErrorBudget error when !double.IsFinite(error.Limit) || !InRange(error):
                Fail($"The budget limit {error.Limit} is out of range for {MetricValues.Name(error.Metric)}.");
                break;
            case SizeBudget { Bytes: null, AverageBits: null }:
            case SizeBudget { Bytes: not null, AverageBits: not null }:
                Fail("A size budget takes exactly one of 'bytes' or 'averageBits'.");
                break;
            case SizeBudget { Bytes: <= 0 }:
            case SizeBudget { AverageBits: <= 0 or > 32 }:
                Fail("A size budget must be positive bytes, or average bits in (0, 32].");
                break;
        }
    }

    private static bool InRange(ErrorBudget budget) => budget.Metric switch
    {
        BudgetMetric.Sqnr => budget.Limit is > 0 and <= 200,
        BudgetMetric.RelativeMse => budget.Limit is > 0 and < 1,
        BudgetMetric.Top1Agreement => budget.Limit is > 0 and <= 1,
        BudgetMetric.KlDivergence => budget.Limit > 0,
        BudgetMetric.CosineSimilarity => budget.Limit is > 0 and <= 1,
        BudgetMetric.AccuracyDrop => budget.Limit is >= 0 and <= 100,
        _ => false,
    };

    private static void Fail(string message) => throw new EngineException("settings-invalid", message);
}
