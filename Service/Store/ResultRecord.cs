namespace Bitbudget.Service.Store;

/// <summary>A finished search's totals and the blobs (by SHA-256) of its artifacts.</summary>
/// <param name="ModelSha256">Null when no quantized model was written (infeasible budget).</param>
/// <param name="Bytes">Null, like the other totals, when the budget cannot be met: there is no chosen assignment to measure.</param>
/// <param name="Predicted">May be infinite (an SQNR with no predicted error); never NaN.</param>
/// <param name="WarningsJson">The engine's warnings (e.g. layers the calibration set does not exercise) as a JSON array of strings, kept as
/// stored so the record compares by value; null for results stored before warnings existed.</param>
/// <param name="Measured">The budget metric on the calibration set (worst judged output).</param>
/// <param name="HeldOutMeasured">The same on the held-out set; null without one.</param>
/// <param name="Bytes">Predicted model file size, counted by <paramref name="Storage"/>.</param>
/// <param name="Compression">FP32 model file size over <paramref name="ModelFileBytes"/>.</param>
/// <param name="ModelFileBytes">Size of the written quantized model file; null when none was written.</param>
internal sealed record ResultRecord(
    string SearchId,
    bool Feasible,
    string Message,
    string ManifestSha256,
    string? ModelSha256,
    string SensitivitySha256,
    string FrontierSha256,
    long? Bytes,
    double? AverageBits,
    double? Compression,
    double? Predicted,
    double? Measured,
    int TrialCount,
    string? WarningsJson = null,
    int? HeldOutSamples = null,
    double? HeldOutMeasured = null,
    bool? HeldOutMeetsBudget = null,
    long? ModelFileBytes = null,
    string Storage = "container",
    string? StorageNote = null)
{
    /// <summary>The warnings, one sentence each; empty when there are none (or none were stored).</summary>
    public IReadOnlyList<string> Warnings() => WarningsJson is null ? [] : StoreJson.Read<List<string>>(WarningsJson);
}
