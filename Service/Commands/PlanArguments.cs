using System.CommandLine;
using System.Globalization;
using Bitbudget.Search;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Service.Commands;

/// <summary>The parsed arguments of <see cref="PlanCommand"/>; malformed ones throw <see cref="ArgumentException"/> with what to write instead.</summary>
/// <param name="Holdout">A second dataset the chosen assignment is checked on; null for none.</param>
/// <param name="Quiet">No progress output.</param>
/// <param name="NoCache">Measure every trial and leave the trial cache (<see cref="TrialCache"/>) alone.</param>
/// <param name="MaxSweepMemoryBytes">Memory the sweep plans for (see <see cref="Search.Evaluation.TrialSessionOptions.MaxSweepMemoryBytes"/>).</param>
internal sealed record PlanArguments(string Model, string Data, SearchSettings Settings, string Out, string? Holdout = null, bool Quiet = false, bool NoCache = false, long MaxSweepMemoryBytes = Search.Evaluation.TrialSessionOptions.DefaultMaxSweepMemoryBytes)
{
    /// <summary>The least sweep memory accepted: below it a run of one sample of a small model barely fits.</summary>
    public const long MinSweepMemoryBytes = 64L << 20;

    /// <summary>Parses a plan command line (without the verb), as <c>plan</c> does.</summary>
    public static PlanArguments Parse(string[] args)
    {
        var options = new PlanOptions();
        var command = new Command("plan");
        foreach (var option in options.All)
        {
            command.Options.Add(option);
        }

        var result = command.Parse(args);
        if (result.Errors.Count > 0)
        {
            throw new ArgumentException(result.Errors[0].Message);
        }

        return From(result, options);
    }

    /// <summary>Reads the values System.CommandLine parsed and checks their forms; the engine checks them against the model later.</summary>
    public static PlanArguments From(ParseResult result, PlanOptions options)
    {
        var sampleAxes = new Dictionary<string, int>(StringComparer.Ordinal);
        foreach (var given in (result.GetValue(options.SampleAxis) ?? []).Select(v => v.Split('=', 2)))
        {
            if (given.Length != 2 || given[0].Length == 0 || !int.TryParse(given[1], CultureInfo.InvariantCulture, out var axis) || axis < 0)
            {
                throw new ArgumentException("--sample-axis takes INPUT=AXIS with a non-negative axis, e.g. --sample-axis state=1.");
            }

            sampleAxes[given[0]] = axis;
        }

        var pins = new Dictionary<string, int>(StringComparer.Ordinal);
        foreach (var pin in (result.GetValue(options.Pin) ?? []).Select(v => v.Split('=', 2)))
        {
            if (pin.Length != 2 || pin[0].Length == 0 || !int.TryParse(pin[1], CultureInfo.InvariantCulture, out var pinned))
            {
                throw new ArgumentException("--pin takes LAYER=BITS, e.g. --pin conv1=8.");
            }

            pins[pin[0]] = pinned;
        }

        List<string>? outputs = null;
        if (result.GetValue(options.Outputs) is { } outputList)
        {
            outputs = outputList.Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries).ToList();
            if (outputs.Count == 0)
            {
                throw new ArgumentException("--outputs takes a comma-separated list of output names, e.g. --outputs probability,next_state.");
            }
        }

        long? targetOpset = null;
        if (result.GetValue(options.TargetOpset) is { } opsetText)
        {
            targetOpset = long.TryParse(opsetText, NumberStyles.None, CultureInfo.InvariantCulture, out var opset)
                ? opset
                : throw new ArgumentException($"--target-opset takes a standard opset number, e.g. 13 or 21; '{opsetText}' is not one.");
        }

        // No --bits: the engine takes the widths the storage tells apart at the model's opset.
        IReadOnlyList<int> candidates = result.GetValue(options.Bits) is { } bits
            ? bits.Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries)
                .Select(b => int.TryParse(b, CultureInfo.InvariantCulture, out var v) ? v : throw new ArgumentException($"--bits takes a comma-separated list of widths, e.g. 2,3,4,6,8; '{b}' is not a number."))
                .ToList()
            : [];
        var rounding = result.GetValue(options.Rounding) is { } roundingList
            ? roundingList.Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries).Select(r => Enum<RoundingMethod>(options.Rounding.Name, r)).ToList()
            : SearchSettings.DefaultRounding;
        var pairs = SearchSettings.DefaultPairs;
        if (result.GetValue(options.Pairs) is { } pairsText
            && (!int.TryParse(pairsText, NumberStyles.None, CultureInfo.InvariantCulture, out pairs) || pairs > SearchSettings.MaxPairs))
        {
            throw new ArgumentException($"--pairs takes a number of layer pairs from 0 (off) to {SearchSettings.MaxPairs}; '{pairsText}' is not one.");
        }

        Budget budget;
        try
        {
            budget = BudgetText.Parse(result.GetRequiredValue(options.Budget));
        }
        catch (EngineException e)
        {
            throw new ArgumentException(e.Message, e);
        }

        var settings = new SearchSettings(
            budget,
            candidates,
            Enum<SearchMethod>(result, options.Method),
            Enum<QuantizationScheme>(result, options.Scheme),
            Enum<Granularity>(result, options.Granularity),
            Enum<ClipMethod>(result, options.Clip),
            result.GetValue(options.Activations),
            pins,
            (result.GetValue(options.Exclude) ?? []).ToList(),
            targetOpset,
            outputs,
            Enum<Search.Evaluation.MetricSpace>(result, options.MetricSpace),
            sampleAxes.Count == 0 ? null : sampleAxes,
            Enum<StorageRule>(result, options.Storage),
            rounding,
            pairs,
            result.GetValue(options.BiasCorrection));
        return new PlanArguments(
            result.GetRequiredValue(options.Model),
            result.GetRequiredValue(options.Data),
            settings,
            result.GetRequiredValue(options.Out),
            result.GetValue(options.Holdout),
            result.GetValue(options.Quiet),
            result.GetValue(options.NoCache),
            MaxSweepMemory(result.GetValue(options.MaxSweepMemory)));
    }

    private static long MaxSweepMemory(string? text) =>
        text is null ? Search.Evaluation.TrialSessionOptions.DefaultMaxSweepMemoryBytes
        : long.TryParse(text, NumberStyles.None, CultureInfo.InvariantCulture, out var bytes) && bytes >= MinSweepMemoryBytes ? bytes
        : throw new ArgumentException($"--max-sweep-memory takes a number of bytes, at least {MinSweepMemoryBytes} (64 MiB), e.g. 1073741824 for 1 GiB; '{text}' is not one.");

    private static T Enum<T>(ParseResult result, Option<string> option)
        where T : struct, System.Enum => Enum<T>(option.Name, result.GetRequiredValue(option));

    private static T Enum<T>(string option, string text)
        where T : struct, System.Enum =>
        WireNames.TryParse<T>(text, out var value)
            ? value
            : throw new ArgumentException($"{option} takes one of: {WireNames.Choices<T>()}; got '{text}'.");
}
