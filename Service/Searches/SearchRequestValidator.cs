using System.Globalization;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;
using Bitbudget.Service.Problems;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Searches;

/// <summary>
/// Checks a search request against the model and dataset it names and fills in defaults. Every field
/// problem is collected (400 invalid-request with one message per field); a request that is well formed
/// but cannot run on this model or dataset is a 422 with its own type.
/// </summary>
internal static class SearchRequestValidator
{
    public static SearchSpec Validate(SearchRequest request, ModelRecord model, DatasetRecord dataset, DatasetRecord? holdout = null)
    {
        var errors = new Dictionary<string, string[]>(StringComparer.Ordinal);
        void Add(string field, string message) => errors[field] = errors.TryGetValue(field, out var list) ? [.. list, message] : [message];

        var budget = ValidateBudget(request.Budget, Add);
        var bits = ValidateBits(request.Bits, Add);
        var method = Choice(request.Method, "knapsack", SearchVocabulary.Methods.Keys, "method", Add);
        var scheme = Choice(request.Scheme, "symmetric", SearchVocabulary.Schemes.Keys, "scheme", Add);
        var granularity = Choice(request.Granularity, "per-channel", SearchVocabulary.Granularities.Keys, "granularity", Add);
        var clip = Choice(request.Clip, "min-max", SearchVocabulary.Clips.Keys, "clip", Add);
        var storage = Choice(request.Storage, "container", SearchVocabulary.Storages.Keys, "storage", Add);
        var rounding = ValidateRounding(request.Rounding, Add);
        if (request.Pairs is < 0 or > SearchSettings.MaxPairs)
        {
            Add("pairs", $"pairs takes 0 (pair terms off) to {SearchSettings.MaxPairs}; {request.Pairs} is out of range.");
        }

        var layerNames = model.Summary.Layers.Select(l => l.Name).ToHashSet(StringComparer.Ordinal);
        var pin = new SortedDictionary<string, int>(StringComparer.Ordinal);
        foreach (var (layer, width) in request.Pin ?? new Dictionary<string, int>())
        {
            if (!layerNames.Contains(layer))
            {
                Add($"pin.{layer}", $"The model has no layer '{layer}'; GET /v1/models/{model.Id} lists its layers.");
            }
            else if (!BitWidths.IsValid(width))
            {
                Add($"pin.{layer}", $"Bit width {width} is not supported; use 2 to 8, 16 (half precision) or 32 (keep FP32).");
            }
            else
            {
                pin[layer] = width;
            }
        }

        var exclude = new List<string>();
        foreach (var layer in request.Exclude ?? [])
        {
            if (!layerNames.Contains(layer))
            {
                Add("exclude", $"The model has no layer '{layer}'; GET /v1/models/{model.Id} lists its layers.");
            }
            else if (request.Pin?.ContainsKey(layer) == true)
            {
                Add("exclude", $"Layer '{layer}' is both pinned and excluded; keep one of the two.");
            }
            else if (!exclude.Contains(layer, StringComparer.Ordinal))
            {
                exclude.Add(layer);
            }
        }

        var opset = model.Summary.Opset;
        if (request.TargetOpset is { } target)
        {
            if (target < opset || target > OnnxModel.HighestTargetOpset)
            {
                Add("targetOpset", target < opset
                    ? $"targetOpset {target} is below the model's opset {opset}; an opset can only be raised (give {opset} to {OnnxModel.HighestTargetOpset})."
                    : $"targetOpset {target} is beyond opset {OnnxModel.HighestTargetOpset}, the newest the raise covers; give {opset} to {OnnxModel.HighestTargetOpset}.");
            }
            else
            {
                opset = target;
            }
        }

        if (layerNames.Count > 0 && exclude.Count == layerNames.Count)
        {
            Add("exclude", "Every layer is excluded, which leaves nothing to search.");
        }

        var metricSpace = Choice(request.MetricSpace, "linear", SearchVocabulary.MetricSpaces.Keys, "metricSpace", Add);
        var sampleAxes = ValidateSampleAxes(request.SampleAxes, model, Add);
        var outputs = ValidateOutputs(request.Outputs, model, Add);

        if (errors.Count > 0)
        {
            var detail = errors.Count == 1
                ? errors.Values.First()[0]
                : $"The search request has {errors.Count.ToString(CultureInfo.InvariantCulture)} problems: " + string.Join(" ", errors.Values.SelectMany(v => v));
            throw new ServiceException(StatusCodes.Status400BadRequest, ProblemTypes.InvalidRequest, detail, errors);
        }

        if (budget!.Metric == "accuracy-drop" && !dataset.Summary.HasLabels)
        {
            throw new ServiceException(
                StatusCodes.Status422UnprocessableEntity,
                "dataset-no-labels",
                $"An accuracy-drop budget needs labels, and dataset {dataset.Id} has none; add a 'labels' array to the archive or use another metric.");
        }

        if (request.Activations == true && opset < 13)
        {
            throw new ServiceException(
                StatusCodes.Status422UnprocessableEntity,
                "activations-need-opset-13",
                $"Quantizing activations needs opset 13 or later (per-axis QuantizeLinear), and this model uses opset {opset}; leave 'activations' off, or raise the model with \"targetOpset\": 13.");
        }

        return new SearchSpec(
            budget, bits, method!, scheme!, granularity!, clip!, request.Activations ?? false, pin, exclude, request.TargetOpset, sampleAxes, outputs, metricSpace!, holdout?.Id, storage!, rounding, request.Pairs ?? SearchSettings.DefaultPairs,
            request.BiasCorrection ?? SearchSettings.DefaultBiasCorrection);
    }

    /// <summary>Lower-case names, nearest first, each once; input accepted in any case; the engine's default when not given.</summary>
    private static List<string> ValidateRounding(IReadOnlyList<string>? given, Action<string, string> add)
    {
        if (given is null)
        {
            return SearchSettings.DefaultRounding.Select(r => WireNames.Format(r)).ToList();
        }

        var names = new List<string>();
        foreach (var text in given)
        {
            var name = text?.Trim().ToLowerInvariant() ?? string.Empty;
            if (!SearchVocabulary.Roundings.ContainsKey(name))
            {
                add("rounding", $"Unknown rounding '{text}'; use one or both of {string.Join(", ", SearchVocabulary.Roundings.Keys)}.");
            }
            else if (!names.Contains(name, StringComparer.Ordinal))
            {
                names.Add(name);
            }
        }

        if (given.Count == 0)
        {
            add("rounding", "rounding must list at least one of nearest, compensated, or be left out for the default.");
        }

        return names.OrderBy(n => SearchVocabulary.Roundings[n]).ToList();
    }

    private static SortedDictionary<string, int>? ValidateSampleAxes(IReadOnlyDictionary<string, int>? given, ModelRecord model, Action<string, string> add)
    {
        if (given is null || given.Count == 0)
        {
            return null;
        }

        var axes = new SortedDictionary<string, int>(StringComparer.Ordinal);
        foreach (var (name, axis) in given)
        {
            var input = model.Summary.Inputs.FirstOrDefault(i => i.Name == name);
            if (input is null)
            {
                add($"sampleAxes.{name}", $"The model has no input '{name}'; its inputs are: {string.Join(", ", model.Summary.Inputs.Select(i => i.Name))}.");
            }
            else if (axis < 0 || axis >= input.Shape.Count)
            {
                add($"sampleAxes.{name}", input.Shape.Count == 0
                    ? $"Input '{name}' is a scalar with no axis to hold samples; feed it a 0-d array (a constant) and leave it out of sampleAxes."
                    : $"Input '{name}' has axes 0 to {input.Shape.Count - 1}; got {axis.ToString(CultureInfo.InvariantCulture)}.");
            }
            else
            {
                axes[name] = axis;
            }
        }

        return axes;
    }

    private static List<string>? ValidateOutputs(IReadOnlyList<string>? given, ModelRecord model, Action<string, string> add)
    {
        if (given is null)
        {
            return null;
        }

        var names = model.Summary.Outputs.Select(o => o.Name).ToList();
        if (given.Count == 0)
        {
            add("outputs", "outputs must name at least one model output, or be left out to judge every output.");
            return null;
        }

        var unknown = given.Where(o => !names.Contains(o, StringComparer.Ordinal)).ToList();
        if (unknown.Count > 0)
        {
            add("outputs", $"The model has no output {string.Join(", ", unknown.Select(u => $"'{u}'"))}; its outputs are: {string.Join(", ", names)}.");
            return null;
        }

        return [.. given.Distinct(StringComparer.Ordinal)];
    }

    private static BudgetSpec? ValidateBudget(BudgetSpec? budget, Action<string, string> add)
    {
        if (budget is null)
        {
            add("budget", "A budget is required: {\"metric\": \"sqnr\", \"atLeast\": 30} for an error budget, or {\"bytes\": N} / {\"averageBits\": B} for a size budget.");
            return null;
        }

        var isSize = budget.Bytes is not null || budget.AverageBits is not null;
        var isError = budget.AtLeast is not null || budget.AtMost is not null;
        if (isSize && isError)
        {
            add("budget", "A budget is either an error bound (atLeast/atMost) or a size bound (bytes/averageBits), not both.");
            return null;
        }

        string? metric = budget.Metric is null ? null : Canonical(budget.Metric, SearchVocabulary.Metrics.Keys);
        if (budget.Metric is not null && metric is null)
        {
            add("budget.metric", $"Unknown metric '{budget.Metric}'; use one of {string.Join(", ", SearchVocabulary.Metrics.Keys)}.");
            return null;
        }

        if (isSize)
        {
            if (budget.Bytes is not null && budget.AverageBits is not null)
            {
                add("budget", "Give bytes or averageBits, not both.");
            }
            else if (budget.Bytes is { } bytes && bytes <= 0)
            {
                add("budget.bytes", "bytes must be a positive number of weight bytes.");
            }
            else if (budget.AverageBits is { } average && (!double.IsFinite(average) || average < BitWidths.MinInteger || average > BitWidths.Float32))
            {
                add("budget.averageBits", $"averageBits must lie between {BitWidths.MinInteger} and {BitWidths.Float32}.");
            }
            else
            {
                return budget with { Metric = metric ?? "sqnr", AtLeast = null, AtMost = null };
            }

            return null;
        }

        if (metric is null)
        {
            add("budget.metric", $"An error budget needs a metric: one of {string.Join(", ", SearchVocabulary.Metrics.Keys)}.");
            return null;
        }

        var lower = SearchVocabulary.Metrics[metric].LowerBound;
        if (lower ? budget.AtLeast is null || budget.AtMost is not null : budget.AtMost is null || budget.AtLeast is not null)
        {
            var (right, wrong) = lower ? ("atLeast", "atMost") : ("atMost", "atLeast");
            add($"budget.{(budget.AtLeast is null && budget.AtMost is null ? right : wrong)}",
                $"'{metric}' is bounded from {(lower ? "below" : "above")}: give {right}, not {wrong} (e.g. {{\"metric\": \"{metric}\", \"{right}\": {Example(metric)}}}).");
            return null;
        }

        var limit = (budget.AtLeast ?? budget.AtMost)!.Value;
        var (min, max, minOpen, unit) = metric switch
        {
            "sqnr" => (0.0, 200.0, true, " dB"),
            "relative-mse" => (0.0, 1.0, true, ""),
            "top1" => (0.0, 1.0, true, " (a fraction, e.g. 0.99)"),
            "kl" => (0.0, 10.0, true, " nats"),
            "cosine" => (0.0, 1.0, true, ""),
            _ => (0.0, 100.0, false, " percentage points"),
        };
        if (!double.IsFinite(limit) || limit > max || (minOpen ? limit <= min : limit < min))
        {
            add($"budget.{(lower ? "atLeast" : "atMost")}",
                $"The {metric} budget must lie in {(minOpen ? "(" : "[")}{min.ToString(CultureInfo.InvariantCulture)}, {max.ToString(CultureInfo.InvariantCulture)}]{unit}; got {limit.ToString(CultureInfo.InvariantCulture)}.");
            return null;
        }

        return budget with { Metric = metric, Bytes = null, AverageBits = null };
    }

    private static string Example(string metric) => metric switch
    {
        "sqnr" => "30",
        "top1" => "0.99",
        "cosine" => "0.999",
        "accuracy-drop" => "0.5",
        "kl" => "0.01",
        _ => "0.001",
    };

    private static List<int>? ValidateBits(IReadOnlyList<int>? bits, Action<string, string> add)
    {
        if (bits is null)
        {
            // The engine picks the widths the storage tells apart at the model's opset.
            return null;
        }

        if (bits.Count == 0)
        {
            add("bits", "bits must list at least one candidate bit width, or be left out for the widths the storage tells apart.");
            return null;
        }

        var invalid = bits.Where(b => !BitWidths.IsValid(b)).Distinct().ToList();
        if (invalid.Count > 0)
        {
            add("bits", $"Unsupported bit width(s) {string.Join(", ", invalid)}; use 2 to 8, 16 (half precision) or 32 (keep FP32).");
            return null;
        }

        if (bits.Distinct().Count() != bits.Count)
        {
            add("bits", "bits lists the same width twice.");
            return null;
        }

        return [.. bits.Order()];
    }

    private static string? Choice(string? value, string fallback, IEnumerable<string> allowed, string field, Action<string, string> add)
    {
        if (value is null)
        {
            return fallback;
        }

        // Input in any case (as the command line takes it); the spec keeps the lowercase wire name.
        if (Canonical(value, allowed) is { } known)
        {
            return known;
        }

        add(field, $"Unknown {field} '{value}'; use one of {string.Join(", ", allowed)}.");
        return null;
    }

    /// <summary>The allowed spelling that matches <paramref name="value"/> ignoring case, or null.</summary>
    private static string? Canonical(string value, IEnumerable<string> allowed) =>
        allowed.FirstOrDefault(a => string.Equals(a, value.Trim(), StringComparison.OrdinalIgnoreCase));
}
