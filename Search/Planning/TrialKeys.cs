using System.Security.Cryptography;
using System.Text;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// The stable keys trials are stored under. A key names what was measured, not when, so a search
/// that runs again (a retried or resumed job) finds its earlier trials and measures nothing twice.
/// </summary>
public static class TrialKeys
{
    /// <summary>Key of the FP32 reference run.</summary>
    public const string Reference = "reference";

    /// <summary>Key of a sensitivity trial; trials with quantized activations (<paramref name="activations"/> set) get keys of their own.</summary>
    public static string Sensitivity(string layer, LayerSetting setting, ActivationCalibration? activations = null) =>
        $"sensitivity/{layer}/{Describe(setting)}{Activations(activations)}";

    /// <summary>Key of the end-to-end measurement of a whole assignment; with quantized activations, a key of its own.</summary>
    public static string Validation(string assignmentHash, ActivationCalibration? activations = null) =>
        $"validation/{assignmentHash}{Activations(activations)}";

    /// <summary>
    /// Key of a pair trial: two layers quantized together, every other layer FP32 (<see cref="PairwiseModel"/>). The two
    /// layers are written in ordinal name order, so a pair has one key whichever way round it was asked for.
    /// </summary>
    public static string Pair(string layer, LayerSetting setting, string other, LayerSetting otherSetting, ActivationCalibration? activations = null) =>
        string.CompareOrdinal(layer, other) <= 0
            ? $"pair/{layer}/{Describe(setting)}/{other}/{Describe(otherSetting)}{Activations(activations)}"
            : Pair(other, otherSetting, layer, setting, activations);

    /// <summary>SHA-256 (hex) of an assignment, independent of dictionary order.</summary>
    /// <remarks>
    /// The hashed text is an identity, not a spelling shown to anyone: it stays what the first stored
    /// validations were hashed from (enum names run together in lowercase), so a search stored before the
    /// keys took the wire names still finds its validations. Changing it would orphan every stored validation.
    /// </remarks>
    public static string AssignmentHash(IReadOnlyDictionary<string, LayerSetting> assignment)
    {
        var text = new StringBuilder();
        foreach (var (layer, setting) in assignment.OrderBy(p => p.Key, StringComparer.Ordinal))
        {
            text.Append(layer).Append('=').Append(HashText(setting)).Append('\n');
        }

        return Convert.ToHexStringLower(SHA256.HashData(Encoding.UTF8.GetBytes(text.ToString())));
    }

    private static string Activations(ActivationCalibration? activations) =>
        activations is { } a ? "/activations-" + WireNames.Format(a) : string.Empty;

    /// <summary>
    /// A setting as a short stable string in the wire names, e.g. "4b-symmetric-per-channel-min-max"; a rounding other
    /// than nearest is appended ("...-compensated"), so nearest keys stay as they were and the two roundings of a width
    /// are two trials; bias correction appends "-bias-corrected", so a trial with corrected biases never matches one without.
    /// </summary>
    public static string Describe(LayerSetting setting) =>
        WithRounding(setting, WithPercentile(setting, $"{setting.Bits}b-{WireNames.Format(setting.Scheme)}-{WireNames.Format(setting.Granularity)}-{WireNames.Format(setting.Clip)}"));

    private static string HashText(LayerSetting setting) =>
        WithRounding(setting, WithPercentile(setting, $"{setting.Bits}b-{setting.Scheme}-{setting.Granularity}-{setting.Clip}".ToLowerInvariant()));

    private static string WithPercentile(LayerSetting setting, string text) =>
        setting.Clip == ClipMethod.Percentile
            ? text + "-" + setting.Percentile.ToString("R", System.Globalization.CultureInfo.InvariantCulture)
            : text;

    private static string WithRounding(LayerSetting setting, string text) =>
        (setting.Rounding == RoundingMethod.Nearest ? text : text + "-" + WireNames.Format(setting.Rounding))
        + (setting.BiasCorrection ? "-" + BiasCorrected : string.Empty);

    /// <summary>The suffix of a bias-corrected setting's key.</summary>
    public const string BiasCorrected = "bias-corrected";
}
