namespace Bitbudget.Search.Planning;

/// <summary>The size-vs-error Pareto frontier as written to frontier.json.</summary>
/// <param name="Metric">The budget metric's wire name.</param>
/// <param name="AdditiveModel">What the additive error sums for that metric.</param>
/// <param name="Layers">Layer names; each point's <see cref="FrontierPoint.Bits"/> follows this order.</param>
/// <param name="TotalPoints">Points on the full frontier (the file may hold a thinned subset).</param>
public sealed record FrontierDocument(string Metric, string AdditiveModel, IReadOnlyList<string> Layers, int TotalPoints, IReadOnlyList<FrontierPoint> Points);

/// <summary>One Pareto-optimal assignment under the additive model.</summary>
/// <param name="Predicted">The budget metric the additive model predicts; null when infinite (SQNR of the zero-error point, e.g. all FP32).</param>
public sealed record FrontierPoint(long Bytes, double AverageBits, double AdditiveError, double? Predicted, IReadOnlyList<int> Bits);
