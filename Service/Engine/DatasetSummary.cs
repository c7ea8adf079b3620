namespace Bitbudget.Service.Engine;

/// <summary>What the engine found in an uploaded calibration set.</summary>
/// <param name="Samples">Number of samples (the leading dimension shared by the input arrays).</param>
/// <param name="HasLabels">Whether the archive carries labels, which accuracy budgets need.</param>
internal sealed record DatasetSummary(string Sha256, IReadOnlyList<ArraySummary> Arrays, long Samples, bool HasLabels);
