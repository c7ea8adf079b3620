namespace Bitbudget.Search.Planning;

/// <summary>
/// One measured cross-layer term: layers <paramref name="First"/> and <paramref name="Second"/> (indices into
/// <see cref="PlanningProblem.Layers"/>, First &lt; Second) quantized together at the given choices.
/// </summary>
/// <param name="FirstChoice">Index into the first layer's choices.</param>
/// <param name="SecondChoice">Index into the second layer's choices.</param>
/// <param name="Joint">The pair trial's additive error (the two layers together, every other layer FP32).</param>
/// <param name="Term">Joint minus the two layers' own additive errors: what the additive model misses for this pair.</param>
/// <param name="Key">The pair trial's key in the store.</param>
internal sealed record PairTerm(int First, int FirstChoice, int Second, int SecondChoice, double Joint, double Term, string Key)
{
    /// <summary>
    /// The term over the bound the Cauchy-Schwarz inequality puts on it for noise powers, 2 sqrt(e_i e_j): the
    /// correlation of the two layers' output errors. 0 when either layer alone adds no error.
    /// </summary>
    public double Correlation(IReadOnlyList<PlanningLayer> layers)
    {
        var scale = PairwiseModel.Scale(layers[First].Choices[FirstChoice].Error, layers[Second].Choices[SecondChoice].Error);
        return scale > 0 ? Term / scale : 0;
    }
}
