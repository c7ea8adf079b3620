using System.Globalization;
using System.Security.Cryptography;
using System.Text;
using Bitbudget.Search.Evaluation;

namespace Bitbudget.Search.Planning;

/// <summary>
/// Names everything a sensitivity trial's result depends on besides its own key (layer and setting): the
/// model's and the dataset's bytes, and every search setting that changes what a trial measures. Two
/// searches with the same context may share sensitivity trials; anything else (budget, method, candidate
/// widths, roundings and bias correction, which each trial's key names, pins, exclusions, judged outputs, storage rule, held-out
/// set) only chooses which trials to run or among them.
/// </summary>
public static class TrialContext
{
    /// <summary>
    /// Raised whenever a change to the engine changes what a stored trial would measure (the quantizer, the
    /// metrics, how runs are batched), so trials measured by an older engine are never reused. 3: the sweep's memory plan
    /// sets aside room for finished trials' outputs, which can change the samples per run under the same setting.
    /// </summary>
    public const int MeasurementVersion = 3;

    /// <summary>
    /// The context as a SHA-256 (hex) of a canonical text; <paramref name="modelSha256"/> and
    /// <paramref name="datasetSha256"/> are the hashes of the uploaded bytes (as the service stores them).
    /// </summary>
    public static string Of(string modelSha256, string datasetSha256, SearchSettings settings, TrialSessionOptions? options = null)
    {
        ArgumentNullException.ThrowIfNull(settings);
        return Convert.ToHexStringLower(SHA256.HashData(Encoding.UTF8.GetBytes(Describe(modelSha256, datasetSha256, settings, options))));
    }

    /// <summary>SHA-256 (hex, lowercase) of a file's bytes, as the service's content-addressed store names them.</summary>
    public static string HashBytes(ReadOnlySpan<byte> bytes) => Convert.ToHexStringLower(SHA256.HashData(bytes));

    /// <summary>The canonical text behind <see cref="Of"/>, one "name=value" per line.</summary>
    public static string Describe(string modelSha256, string datasetSha256, SearchSettings settings, TrialSessionOptions? options = null)
    {
        ArgumentNullException.ThrowIfNull(settings);
        var session = options ?? new TrialSessionOptions();
        var activations = SensitivitySweep.ActivationsFor(settings);
        var axes = string.Join(',', (settings.SampleAxes ?? new Dictionary<string, int>())
            .OrderBy(p => p.Key, StringComparer.Ordinal)
            .Select(p => string.Create(CultureInfo.InvariantCulture, $"{p.Key}:{p.Value}")));
        var text = new StringBuilder();
        text.Append("version=").Append(MeasurementVersion).Append('\n');
        text.Append("model=").Append(modelSha256.ToLowerInvariant()).Append('\n');
        text.Append("dataset=").Append(datasetSha256.ToLowerInvariant()).Append('\n');

        // Scheme, granularity and clip are in each trial's key too; here they keep a key's meaning stable if that ever changes.
        text.Append("scheme=").Append(WireNames.Format(settings.Scheme)).Append('\n');
        text.Append("granularity=").Append(WireNames.Format(settings.Granularity)).Append('\n');
        text.Append("clip=").Append(WireNames.Format(settings.Clip)).Append('\n');
        text.Append("activations=").Append(activations is { } a ? WireNames.Format(a) : "off").Append('\n');
        text.Append("targetOpset=").Append(settings.TargetOpset?.ToString(CultureInfo.InvariantCulture) ?? "upload").Append('\n');
        text.Append("metricSpace=").Append(WireNames.Format(settings.MetricSpace)).Append('\n');
        text.Append("sampleAxes=").Append(axes).Append('\n');

        // Samples per run (from the batch cap and the sweep's memory) decide how ONNX Runtime batches the data, which can move results in the last bits.
        text.Append("maxBatch=").Append(session.MaxBatch.ToString(CultureInfo.InvariantCulture)).Append('\n');
        text.Append("maxSweepMemory=").Append(session.MaxSweepMemoryBytes.ToString(CultureInfo.InvariantCulture)).Append('\n');
        return text.ToString();
    }
}
