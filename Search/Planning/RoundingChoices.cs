using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// Which roundings a search measures for a layer, and which measured one a width keeps. Every rounding of a width
/// costs the same bytes (same grid, same storage), so per layer and width the one with the lower additive error is
/// kept, nearest on a tie.
/// </summary>
public static class RoundingChoices
{
    /// <summary>Whether a search with these settings gathers its layers' input moments first (compensated rounding or bias correction).</summary>
    public static bool NeedsInputMoments(SearchSettings settings)
    {
        ArgumentNullException.ThrowIfNull(settings);
        return settings.BiasCorrection || Asked(settings).Contains(RoundingMethod.Compensated);
    }

    /// <summary>The roundings the settings ask for, nearest first; nearest alone when none are given.</summary>
    public static IReadOnlyList<RoundingMethod> Asked(SearchSettings settings)
    {
        ArgumentNullException.ThrowIfNull(settings);
        return settings.Rounding is { Count: > 0 } asked ? asked.Distinct().Order().ToList() : [RoundingMethod.Nearest];
    }

    /// <summary>
    /// The roundings measured for <paramref name="layer"/>: those asked, with compensated only where
    /// <paramref name="compensates"/> says the layer's inputs are known; nearest when nothing else is left.
    /// </summary>
    public static IReadOnlyList<RoundingMethod> For(string layer, SearchSettings settings, Func<string, bool>? compensates)
    {
        var usable = Asked(settings).Where(r => r == RoundingMethod.Nearest || compensates?.Invoke(layer) == true).ToList();
        return usable.Count > 0 ? usable : [RoundingMethod.Nearest];
    }

    /// <summary>The settings of a width whose sensitivity trial is in <paramref name="measured"/>, nearest first.</summary>
    public static IEnumerable<LayerSetting> Measured(string layer, int bits, SearchSettings settings, Func<string, bool> measured)
    {
        ArgumentNullException.ThrowIfNull(measured);
        var activations = SensitivitySweep.ActivationsFor(settings);
        return Enum.GetValues<RoundingMethod>()
            .Select(r => SensitivitySweep.SettingFor(bits, settings) with { Rounding = r })
            .Where(s => measured(TrialKeys.Sensitivity(layer, s, activations)));
    }
}
