namespace Bitbudget.Service.Api;

/// <summary>The chosen assignment on the held-out dataset.</summary>
/// <param name="Samples">Samples in the held-out dataset.</param>
/// <param name="Measured">The budget metric measured on it (worst judged output), in the budget's units.</param>
/// <param name="MeetsBudget">Whether it meets the error budget; null for a size budget.</param>
internal sealed record HeldOutResponse(int Samples, double Measured, bool? MeetsBudget);
