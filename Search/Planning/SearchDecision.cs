namespace Bitbudget.Search.Planning;

/// <summary>The outcome of the solve-and-validate loop.</summary>
/// <param name="Chosen">The smallest assignment that met the budget when measured (size budget: the least-error one that fits); null when infeasible.</param>
/// <param name="Rounds">Every assignment measured by the loop, in order.</param>
/// <param name="PredictedAdditive">The additive error the model predicted for <paramref name="Chosen"/>.</param>
/// <param name="Pairs">The pair terms measured for the prediction (none when pairs are off or for a size budget).</param>
internal sealed record SearchDecision(
    bool Feasible,
    string Message,
    AssignmentMeasurement? Chosen,
    IReadOnlyList<AssignmentMeasurement> Rounds,
    double PredictedAdditive,
    IReadOnlyList<PairTerm>? Pairs = null);
