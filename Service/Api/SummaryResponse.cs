namespace Bitbudget.Service.Api;

/// <param name="Bytes">Predicted size of the quantized model file, counted by <paramref name="Storage"/>; null, like every total, when the budget cannot be met.</param>
/// <param name="Compression">Size of the FP32 model file over the size of the written quantized file.</param>
/// <param name="Predicted">The budget metric as the additive error model predicts it ("Infinity" for an SQNR with no predicted error).</param>
/// <param name="Measured">The budget metric measured end to end.</param>
/// <param name="Feasible">False when the budget cannot be met even at the highest candidate width; <paramref name="Message"/> then gives the numbers.</param>
/// <param name="HeldOut">The same figure on the held-out dataset, beside <paramref name="Measured"/>; null without one.</param>
/// <param name="Warnings">Sentences to read before trusting the result: a layer the calibration set does not exercise, few samples carrying an output's power, a held-out figure that misses the budget.</param>
/// <param name="ModelFileBytes">Size of the written quantized model file (what GET /model returns); null when none was written.</param>
/// <param name="Storage">"container" (sizes as the file stores them) or "packed" (b-bit weights counted as b bits).</param>
/// <param name="StorageNote">What the storage rule closed off: widths that save nothing, smaller choices with packed storage or opset 21.</param>
internal sealed record SummaryResponse(
    long? Bytes,
    double? AverageBits,
    double? Compression,
    double? Predicted,
    double? Measured,
    bool Feasible,
    string Message,
    int TrialCount,
    HeldOutResponse? HeldOut,
    IReadOnlyList<string> Warnings,
    long? ModelFileBytes,
    string Storage,
    string? StorageNote);
