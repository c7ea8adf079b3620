using System.Globalization;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Service.Commands;

/// <summary>The parsed arguments of <see cref="PlanCommand"/>; malformed ones throw <see cref="ArgumentException"/> with what to write instead.</summary>
/// <param name="Holdout">A second dataset the chosen assignment is checked on; null for none.</param>
/// <param name="NoCache">Measure every trial and leave the trial cache (<see cref="TrialCache"/>) alone.</param>
/// <param name="MaxSweepMemoryBytes">Memory the sweep plans for (see <see cref="Search.Evaluation.TrialSessionOptions.MaxSweepMemoryBytes"/>).</param>
internal sealed record PlanArguments(string Model, string Data, SearchSettings Settings, string Out, string? Holdout = null, bool NoCache = false, long MaxSweepMemoryBytes = Search.Evaluation.TrialSessionOptions.DefaultMaxSweepMemoryBytes)
{
    /// <summary>The least sweep memory accepted: below it a run of one sample of a small model barely fits.</summary>
    public const long MinSweepMemoryBytes = 64L << 20;

    public static PlanArguments Parse(string[] args)
    {
        string? model = null, data = null, budget = null, bits = null, outDir = null, holdout = null;
        var metricSpace = Search.Evaluation.MetricSpace.Linear;
        var sampleAxes = new Dictionary<string, int>(StringComparer.Ordinal);
        List<string>? outputs = null;
        var method = SearchMethod.Knapsack;
        var scheme = QuantizationScheme.Symmetric;
        var granularity = Granularity.PerChannel;
        var clip = ClipMethod.MinMax;
        var activations = false;
        var noCache = false;
        var maxSweepMemory = Search.Evaluation.TrialSessionOptions.DefaultMaxSweepMemoryBytes;
        long? targetOpset = null;
        var storage = StorageRule.Container;
        var pins = new Dictionary<string, int>(StringComparer.Ordinal);
        var excluded = new List<string>();
        List<RoundingMethod>? rounding = null;
        for (var i = 0; i < args.Length; i++)
        {
            var name = args[i];
            string Value() => i + 1 < args.Length ? args[++i] : throw new ArgumentException($"{name} needs a value.");
            switch (name)
            {
                case "--model": model = Value(); break;
                case "--data": data = Value(); break;
                case "--budget": budget = Value(); break;
                case "--bits": bits = Value(); break;
                case "--out": outDir = Value(); break;
                case "--method": method = Enum<SearchMethod>(name, Value()); break;
                case "--scheme": scheme = Enum<QuantizationScheme>(name, Value()); break;
                case "--granularity": granularity = Enum<Granularity>(name, Value()); break;
                case "--clip": clip = Enum<ClipMethod>(name, Value()); break;
                case "--storage": storage = Enum<StorageRule>(name, Value()); break;
                case "--exclude": excluded.Add(Value()); break;
                case "--activations": activations = true; break;
                case "--no-cache": noCache = true; break;
                case "--max-sweep-memory":
                    var memoryText = Value();
                    maxSweepMemory = long.TryParse(memoryText, NumberStyles.None, CultureInfo.InvariantCulture, out var memoryBytes) && memoryBytes >= MinSweepMemoryBytes
                        ? memoryBytes
                        : throw new ArgumentException($"--max-sweep-memory takes a number of bytes, at least {MinSweepMemoryBytes} (64 MiB), e.g. 1073741824 for 1 GiB; '{memoryText}' is not one.");
                    break;
                case "--target-opset":
                    var opsetText = Value();
                    targetOpset = long.TryParse(opsetText, NumberStyles.None, CultureInfo.InvariantCulture, out var opset)
                        ? opset
                        : throw new ArgumentException($"--target-opset takes a standard opset number, e.g. 13 or 21; '{opsetText}' is not one.");
                    break;
                case "--holdout": holdout = Value(); break;
                case "--rounding": rounding = Value().Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries).Select(r => Enum<RoundingMethod>(name, r)).ToList(); break;
                case "--metric-space": metricSpace = Enum<Search.Evaluation.MetricSpace>(name, Value()); break;
                case "--outputs":
                    outputs = Value().Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries).ToList();
                    if (outputs.Count == 0)
                    {
                        throw new ArgumentException("--outputs takes a comma-separated list of output names, e.g. --outputs probability,next_state.");
                    }

                    break;
                case "--sample-axis":
                    var given = Value().Split('=', 2);
                    if (given.Length != 2 || given[0].Length == 0 || !int.TryParse(given[1], CultureInfo.InvariantCulture, out var axis) || axis < 0)
                    {
                        throw new ArgumentException("--sample-axis takes INPUT=AXIS with a non-negative axis, e.g. --sample-axis state=1.");
                    }

                    sampleAxes[given[0]] = axis;
                    break;
                case "--pin":
                    var pin = Value().Split('=', 2);
                    if (pin.Length != 2 || !int.TryParse(pin[1], CultureInfo.InvariantCulture, out var pinned))
                    {
                        throw new ArgumentException("--pin takes LAYER=BITS, e.g. --pin conv1=8.");
                    }

                    pins[pin[0]] = pinned;
                    break;
                default:
                    throw new ArgumentException($"Unknown option '{name}'.");
            }
        }

        if (model is null || data is null || budget is null)
        {
            throw new ArgumentException("--model, --data and --budget are required.");
        }

        // No --bits: the engine takes the widths the storage tells apart at the model's opset.
        IReadOnlyList<int> candidates = bits is null
            ? []
            : bits.Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries)
                .Select(b => int.TryParse(b, CultureInfo.InvariantCulture, out var v) ? v : throw new ArgumentException($"--bits takes a comma-separated list of widths, e.g. 2,3,4,6,8; '{b}' is not a number."))
                .ToList();
        var settings = new SearchSettings(
            BudgetText.Parse(budget), candidates, method, scheme, granularity, clip, activations, pins, excluded, targetOpset, outputs, metricSpace, sampleAxes.Count == 0 ? null : sampleAxes, storage, rounding);
        return new PlanArguments(model, data, settings, outDir ?? "plan", holdout, noCache, maxSweepMemory);
    }

    private static T Enum<T>(string option, string text)
        where T : struct, System.Enum =>
        WireNames.TryParse<T>(text, out var value)
            ? value
            : throw new ArgumentException($"{option} takes one of: {WireNames.Choices<T>()}; got '{text}'.");
}
