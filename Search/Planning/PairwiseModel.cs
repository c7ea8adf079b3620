namespace Bitbudget.Search.Planning;

/// <summary>
/// The additive error model plus measured cross-layer terms, after the pairwise idea of Deng et al., 2023 ("CLADO"):
/// the error of two layers quantized together is not the sum of their errors alone, and the difference can be
/// measured on pairs for a few extra trials. The corrected prediction of an assignment is
/// <c>sum_i e_i(b_i) + sum over measured pairs of D_ij(b_i, b_j)</c>, floored at 0, where D_ij = e(i and j together) - e_i - e_j
/// in the units of <see cref="AdditiveError"/>.
/// </summary>
/// <remarks>
/// A pair's term is known exactly at the widths its trials measured. At other widths it is estimated: for noise
/// powers, e(i and j) - e_i - e_j = 2 &lt;n_i, n_j&gt; for output errors n_i, n_j that superpose, which is
/// 2 rho sqrt(e_i e_j) with rho their correlation. rho is taken from the pair's measured combination nearest in
/// widths and scaled by the layers' own errors at the asked widths. Pairs not measured count zero, as in the additive
/// model. For the other metrics (disagreement, KL, 1 - cosine, accuracy drop) the same scaling is a rough estimate.
/// </remarks>
internal sealed class PairwiseModel
{
    private readonly IReadOnlyList<PlanningLayer> _layers;
    private readonly Dictionary<(int First, int Second), List<PairTerm>> _terms = [];

    public PairwiseModel(IReadOnlyList<PlanningLayer> layers) => _layers = layers;

    /// <summary>Every measured term, in the order it was added.</summary>
    public List<PairTerm> Terms { get; } = [];

    /// <summary>True when no term is known: the model is the additive one.</summary>
    public bool IsAdditive => Terms.Count == 0;

    /// <summary>The bound 2 sqrt(e_i e_j) on a noise-power cross term (Cauchy-Schwarz).</summary>
    public static double Scale(double first, double second) => 2 * Math.Sqrt(Math.Max(0, first) * Math.Max(0, second));

    public void Add(PairTerm term)
    {
        Terms.Add(term);
        var key = (term.First, term.Second);
        if (!_terms.TryGetValue(key, out var list))
        {
            _terms[key] = list = [];
        }

        list.Add(term);
    }

    /// <summary>True when the pair was measured at exactly these choices.</summary>
    public bool Measured(int first, int firstChoice, int second, int secondChoice) =>
        _terms.TryGetValue((first, second), out var list) && list.Exists(t => t.FirstChoice == firstChoice && t.SecondChoice == secondChoice);

    /// <summary>Layer pairs with at least one measured term.</summary>
    public int PairCount => _terms.Count;

    /// <summary>Width combinations measured for a pair.</summary>
    public int Combinations(int first, int second) => _terms.TryGetValue((first, second), out var list) ? list.Count : 0;

    /// <summary>The corrected prediction of a selection: its additive sum plus the pair terms, floored at 0.</summary>
    public double Predict(Selection selection)
    {
        var total = selection.Error;
        foreach (var ((first, second), list) in _terms)
        {
            total += Estimate(list, selection.ChoiceIndex[first], selection.ChoiceIndex[second]);
        }

        return Math.Max(0, total);
    }

    private double Estimate(List<PairTerm> measured, int firstChoice, int secondChoice)
    {
        PairTerm? nearest = null;
        var distance = int.MaxValue;
        foreach (var term in measured)
        {
            if (term.FirstChoice == firstChoice && term.SecondChoice == secondChoice)
            {
                return term.Term;
            }

            var d = Math.Abs(Bits(term.First, term.FirstChoice) - Bits(term.First, firstChoice))
                + Math.Abs(Bits(term.Second, term.SecondChoice) - Bits(term.Second, secondChoice));
            if (d < distance)
            {
                (nearest, distance) = (term, d);
            }
        }

        if (nearest is null)
        {
            return 0;
        }

        return nearest.Correlation(_layers) * Scale(_layers[nearest.First].Choices[firstChoice].Error, _layers[nearest.Second].Choices[secondChoice].Error);
    }

    private int Bits(int layer, int choice) => _layers[layer].Choices[choice].Bits;
}
