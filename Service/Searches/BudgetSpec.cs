namespace Bitbudget.Service.Searches;

/// <summary>
/// An error budget (<see cref="Metric"/> with <see cref="AtLeast"/> or <see cref="AtMost"/>) or a size budget
/// (<see cref="Bytes"/> or <see cref="AverageBits"/>, with the metric to minimise).
/// </summary>
internal sealed record BudgetSpec(string? Metric, double? AtLeast = null, double? AtMost = null, long? Bytes = null, double? AverageBits = null);
