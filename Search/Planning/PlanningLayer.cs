namespace Bitbudget.Search.Planning;

/// <summary>A layer as the solvers see it: a name and its candidate choices (a pinned layer has one).</summary>
public sealed record PlanningLayer(string Name, IReadOnlyList<PlanningChoice> Choices);
