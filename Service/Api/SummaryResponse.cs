namespace Bitbudget.Service.Api;

/// <param name="Bytes">Weight bytes of the chosen assignment.</param>
/// <param name="Compression">FP32 weight bytes over chosen bytes.</param>
/// <param name="Predicted">The budget metric as the additive error model predicts it.</param>
/// <param name="Measured">The budget metric measured end to end.</param>
/// <param name="Feasible">False when the budget cannot be met even at the highest candidate width.</param>
/// <param name="HeldOut">The same figure on the held-out dataset, beside <paramref name="Measured"/>; null without one.</param>
/// <param name="Warnings">Sentences to read before trusting the result: a layer the calibration set does not exercise, few samples carrying an output's power, a held-out figure that misses the budget.</param>
internal sealed record SummaryResponse(
    long Bytes,
    double AverageBits,
    double Compression,
    double Predicted,
    double Measured,
    bool Feasible,
    string Message,
    int TrialCount,
    HeldOutResponse? HeldOut,
    IReadOnlyList<string> Warnings);
