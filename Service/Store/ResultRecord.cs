namespace Bitbudget.Service.Store;

/// <summary>A finished search's totals and the blobs (by SHA-256) of its artifacts.</summary>
/// <param name="Warnings">The engine's warnings (e.g. layers the calibration set does not exercise); null for results stored before warnings existed.</param>
internal sealed record ResultRecord(
    string SearchId,
    bool Feasible,
    string Message,
    string ManifestSha256,
    string? ModelSha256,
    string SensitivitySha256,
    string FrontierSha256,
    long Bytes,
    double AverageBits,
    double Compression,
    double Predicted,
    double Measured,
    int TrialCount,
    IReadOnlyList<string>? Warnings = null);
