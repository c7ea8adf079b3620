namespace Bitbudget.Service.Engine;

/// <summary>One array of a dataset archive.</summary>
/// <param name="Dtype">NumPy dtype descriptor as stored, e.g. "&lt;f4".</param>
internal sealed record ArraySummary(string Name, string Dtype, IReadOnlyList<long> Shape);
