using System.Globalization;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// How much of the calibration set reaches one layer: the most samples any of its sensitivity trials changed.
/// A layer the data does not reach measures "lossless" at every width, which would hand it the fewest bits;
/// a flagged layer keeps the highest candidate width (or its pin) instead.
/// </summary>
/// <param name="Layer">Layer name.</param>
/// <param name="Status">Exercised, barely exercised or not exercised.</param>
/// <param name="SamplesChanged">Most samples with any output bit changed, over the layer's trials; null when no trial recorded it.</param>
/// <param name="Samples">Calibration samples.</param>
/// <param name="KeptBits">The width the layer keeps when flagged (highest candidate or pin); null when exercised.</param>
public sealed record LayerCoverage(string Layer, CoverageStatus Status, int? SamplesChanged, int Samples, int? KeptBits)
{
    /// <summary>
    /// A layer whose trials change fewer than this share of the samples is barely exercised. SQNR and the other
    /// metrics average over every sample, so a path taken by under 1% of them has its error diluted at least
    /// 100 times (20 dB): its measured sensitivity says almost nothing about the samples that take it.
    /// </summary>
    public const double BarelyExercisedShare = 0.01;

    /// <summary>True when the layer is kept at its highest candidate (or pin) for lack of coverage.</summary>
    public bool Flagged => Status != CoverageStatus.Exercised;

    /// <summary>One sentence for people: which layer, what the trials showed, and what was done about it.</summary>
    public string Reason => Status switch
    {
        CoverageStatus.NotExercised =>
            $"Layer '{Layer}' is not exercised: quantizing it changed no output of any of the {Samples} calibration samples at any width, " +
            $"so the calibration set never reaches it (an If branch no sample takes, a path fed only zeros) or its weight is unchanged by quantization; " +
            $"it keeps {Bits(KeptBits)} and its error is unmeasured. Add samples that take this path.",
        CoverageStatus.BarelyExercised =>
            $"Layer '{Layer}' is barely exercised: quantizing it changed the outputs of at most {SamplesChanged} of the {Samples} calibration samples " +
            $"(under {BarelyExercisedShare:P0}), too few for its error to show in the averaged metrics; it keeps {Bits(KeptBits)}. Add samples that take this path.",
        _ => $"Layer '{Layer}' is exercised by the calibration set.",
    };

    /// <summary>Wire name of a status ("exercised", "barely-exercised", "not-exercised").</summary>
    public static string Wire(CoverageStatus status) => status switch
    {
        CoverageStatus.NotExercised => "not-exercised",
        CoverageStatus.BarelyExercised => "barely-exercised",
        _ => "exercised",
    };

    /// <summary>Judges a layer from the sample counts of its trials (null counts: trials stored before counting existed).</summary>
    public static LayerCoverage Judge(string layer, IReadOnlyCollection<int?> samplesChangedPerTrial, int samples, int keptBits)
    {
        ArgumentNullException.ThrowIfNull(samplesChangedPerTrial);
        if (samplesChangedPerTrial.Count == 0 || samplesChangedPerTrial.Any(c => c is null))
        {
            return new LayerCoverage(layer, CoverageStatus.Exercised, null, samples, null);
        }

        var most = samplesChangedPerTrial.Max(c => c!.Value);
        var status = most == 0 ? CoverageStatus.NotExercised
            : most < BarelyExercisedShare * samples ? CoverageStatus.BarelyExercised
            : CoverageStatus.Exercised;
        return new LayerCoverage(layer, status, most, samples, status == CoverageStatus.Exercised ? null : keptBits);
    }

    private static string Bits(int? bits) => bits is { } b ? BitWidths.Describe(b) : "its width";
}
