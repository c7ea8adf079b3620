namespace Bitbudget.Search.Planning;

/// <summary>
/// Which layer pairs get a pair trial. The pairs that can move the prediction most are those whose cross term can
/// be largest at the widths the search is about to choose: for noise powers the term is at most 2 sqrt(e_i e_j)
/// (Cauchy-Schwarz), so pairs are ranked by e_i(b_i) e_j(b_j) at the widths of the assignment about to be validated,
/// whether the layers are adjacent or not, and the first <c>maxPairs</c> are kept. A layer the plan leaves without
/// error (FP32, or a width that changed no output) is in no pair.
/// </summary>
internal static class PairRanking
{
    /// <summary>The pairs to measure, as (first, second) layer indices with first &lt; second, largest bound first.</summary>
    public static IReadOnlyList<(int First, int Second)> Choose(IReadOnlyList<PlanningLayer> layers, Selection plan, int maxPairs)
    {
        if (maxPairs <= 0)
        {
            return [];
        }

        double ErrorOf(int i) => layers[i].Choices[plan.ChoiceIndex[i]].Error;

        // The top maxPairs products all lie among the maxPairs + 1 layers with the largest errors: a pair reaching
        // beyond them is outranked by the maxPairs pairs its larger member forms with those layers.
        var top = Enumerable.Range(0, layers.Count)
            .Where(i => ErrorOf(i) > 0 && double.IsFinite(ErrorOf(i)))
            .OrderByDescending(ErrorOf).ThenBy(i => i)
            .Take(maxPairs + 1)
            .ToList();
        var pairs = new List<(int First, int Second, double Bound)>();
        for (var a = 0; a < top.Count; a++)
        {
            for (var b = a + 1; b < top.Count; b++)
            {
                var (first, second) = top[a] < top[b] ? (top[a], top[b]) : (top[b], top[a]);
                pairs.Add((first, second, ErrorOf(first) * ErrorOf(second)));
            }
        }

        return pairs.OrderByDescending(p => p.Bound).ThenBy(p => p.First).ThenBy(p => p.Second)
            .Take(maxPairs).Select(p => (p.First, p.Second)).ToList();
    }
}
