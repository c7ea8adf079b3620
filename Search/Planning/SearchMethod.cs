namespace Bitbudget.Search.Planning;

/// <summary>How the bit-width assignment is searched.</summary>
public enum SearchMethod
{
    /// <summary>Exact multiple-choice knapsack over the additive error model (Pareto-set dynamic programme).</summary>
    Knapsack,

    /// <summary>Lower the layer with the least error per byte saved until the budget binds.</summary>
    Greedy,
}
