namespace Bitbudget.Search.Planning;

/// <summary>An assignment: one choice per layer, with its total bytes and summed additive error.</summary>
/// <param name="ChoiceIndex">ChoiceIndex[i] indexes layers[i].Choices.</param>
/// <param name="Bytes">Sum of the chosen choices' bytes.</param>
/// <param name="Error">Sum of the chosen choices' errors, added in layer order.</param>
public sealed record Selection(IReadOnlyList<int> ChoiceIndex, long Bytes, double Error)
{
    /// <summary>
    /// True when the knapsack had to thin its frontier to stay under its point cap; the selection is
    /// then feasible but may use up to <see cref="FrontierResult.BytesFactorBound"/> times the optimal bytes.
    /// </summary>
    public bool Thinned { get; init; }
}
