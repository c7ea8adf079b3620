namespace Bitbudget.Search.Planning;

/// <summary>Whether the calibration set reaches a layer, as its sensitivity trials show.</summary>
public enum CoverageStatus
{
    /// <summary>Quantizing the layer changes the outputs of at least 1% of the samples at some width (or coverage is unknown).</summary>
    Exercised,

    /// <summary>Quantizing the layer changes the outputs of some samples, but fewer than 1% of them, at every width.</summary>
    BarelyExercised,

    /// <summary>Quantizing the layer changes no output bit of any sample at any width.</summary>
    NotExercised,
}
