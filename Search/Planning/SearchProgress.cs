namespace Bitbudget.Search.Planning;

/// <summary>Progress of a running search: the stage and how many of its units (trials) are done.</summary>
public sealed record SearchProgress(SearchStage Stage, int Done, int Total);
