using System.CommandLine;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Service.Commands;

/// <summary>
/// The options of <c>plan</c>, one field each (names as in README's vocabulary table, the kebab-case of the
/// API's field names). A new option is a field here, a line in <see cref="All"/> and a read in
/// <see cref="PlanArguments.From"/>; help picks up its description and default by itself.
/// </summary>
internal sealed class PlanOptions
{
    public Option<string> Model { get; } = new("--model") { HelpName = "M.onnx", Description = "The FP32 ONNX model.", Required = true };

    public Option<string> Data { get; } = new("--data") { HelpName = "D.npz", Description = "The calibration set: one array per model input, named after it (and 'labels' for accuracy-drop).", Required = true };

    public Option<string> Budget { get; } = new("--budget")
    {
        HelpName = "BUDGET",
        Description = "sqnr>=30, relative-mse<=1e-3, top1>=0.99, kl<=0.01, cosine>=0.999, accuracy-drop<=0.5, bytes<=2500000 or average-bits<=4.5.",
        Required = true,
    };

    public Option<string> Bits { get; } = new("--bits")
    {
        HelpName = "B,B,...",
        Description = "Candidate widths, from 2..8, 16 (FP16), 32 (keep FP32). Default: the widths the storage tells apart at the model's opset.",
    };

    public Option<string> Method { get; } = Choice<SearchMethod>("--method", SearchMethod.Knapsack, "How the assignment is searched.");

    public Option<string> Scheme { get; } = Choice<QuantizationScheme>("--scheme", QuantizationScheme.Symmetric, "Weight grid: zero point 0, or an affine one.");

    public Option<string> Granularity { get; } = Choice<Granularity>("--granularity", Search.Quantization.Granularity.PerChannel, "One scale per output channel or per tensor.");

    public Option<string> Clip { get; } = Choice<ClipMethod>("--clip", ClipMethod.MinMax, "How each weight's range is clipped.");

    public Option<string[]> Pin { get; } = new("--pin") { HelpName = "LAYER=BITS", Description = "Fix a layer's width (repeatable)." };

    public Option<string[]> Exclude { get; } = new("--exclude") { HelpName = "LAYER", Description = "Keep a layer FP32 (repeatable)." };

    public Option<bool> Activations { get; } = new("--activations") { Description = "Also quantize activations to 8 bits (opset 13 or later)." };

    public Option<string> TargetOpset { get; } = new("--target-opset") { HelpName = "N", Description = "Raise the model to standard opset N first (up to 22). Default: the model's own opset." };

    public Option<string[]> SampleAxis { get; } = new("--sample-axis") { HelpName = "INPUT=AXIS", Description = "The axis of an input along which the samples lie (repeatable). Default: its one dynamic axis, else 0." };

    public Option<string> Outputs { get; } = new("--outputs") { HelpName = "A,B", Description = "The outputs the budget judges. Default: all." };

    public Option<string> MetricSpace { get; } = Choice<MetricSpace>("--metric-space", Search.Evaluation.MetricSpace.Linear, "Compare outputs as they are, or as logits.");

    public Option<string> Holdout { get; } = new("--holdout") { HelpName = "H.npz", Description = "A second dataset the chosen assignment is checked on." };

    public Option<string> Storage { get; } = Choice<StorageRule>("--storage", StorageRule.Container, "How sizes are counted: the file ONNX writes, or bits packed.");

    public Option<string> Rounding { get; } = new("--rounding")
    {
        HelpName = "R,R",
        Description = "Rounding methods to try per layer and width: " + WireNames.Choices<RoundingMethod>() + " (compensated: the GPTQ update, Frantar et al. 2022). Default: " + string.Join(",", SearchSettings.DefaultRounding.Select(r => WireNames.Format(r))) + ".",
    };

    public Option<string> Pairs { get; } = new("--pairs")
    {
        HelpName = "N",
        Description = "Most layer pairs measured together so the search predicts how layers' errors interact (0 to 64; 0: off). Default: " + SearchSettings.DefaultPairs.ToString(System.Globalization.CultureInfo.InvariantCulture) + ".",
    };

    public Option<bool> BiasCorrection { get; } = new("--bias-correction")
    {
        HelpName = "true|false",
        Description = "Correct each quantized layer's bias for the mean output shift of its quantized weight (Nagel et al. 2019), with either rounding.",
        DefaultValueFactory = _ => SearchSettings.DefaultBiasCorrection,
    };

    public Option<string> Out { get; } = new("--out") { HelpName = "DIR", Description = "Where the artifacts are written (created if missing).", DefaultValueFactory = _ => "plan" };

    public Option<bool> Quiet { get; } = new("--quiet", "-q") { Description = "No progress; errors, warnings and the summary only." };

    public Option<string> MaxSweepMemory { get; } = new("--max-sweep-memory") { HelpName = "BYTES", Description = "Memory the sweep plans its cached activations and samples per run for (at least 64 MiB). Default: 1 GiB." };

    public Option<bool> NoCache { get; } = new("--no-cache") { Description = "Measure every trial and leave the trial cache (under XDG_CACHE_HOME or ~/.cache/bitbudget/trials) alone." };

    public IEnumerable<Option> All =>
    [
        Model, Data, Budget, Bits, Method, Scheme, Granularity, Clip, Pin, Exclude, Activations, TargetOpset, SampleAxis, Outputs, MetricSpace,
        Holdout, Storage, Rounding, Pairs, BiasCorrection, Out, Quiet, NoCache, MaxSweepMemory,
    ];

    // Choices are read case-insensitively by PlanArguments (WireNames), so the option takes any string and help lists the spellings.
    private static Option<string> Choice<T>(string name, T fallback, string description)
        where T : struct, Enum =>
        new(name)
        {
            HelpName = WireNames.Choices<T>().Replace(", ", "|", StringComparison.Ordinal),
            Description = description,
            DefaultValueFactory = _ => WireNames.Format(fallback),
        };
}
