namespace Bitbudget.Search.Planning;

/// <summary>
/// The choices a budgeted knapsack query still has to consider once reduced-cost fixing (see
/// <see cref="LagrangeBound.Admits"/>) has ruled out those that cannot tie or beat the greedy incumbent. On real
/// and synthetic instances most layers keep one or two choices, so the Pareto programme over this core is a small
/// fraction of the programme over every choice, and still exact.
/// </summary>
internal sealed class KnapsackCore
{
    private readonly int[][] _originalIndex;

    private KnapsackCore(IReadOnlyList<PlanningLayer> layers, int[][] originalIndex)
    {
        Layers = layers;
        _originalIndex = originalIndex;
    }

    /// <summary>The layers with only their admitted choices, in the original layer order.</summary>
    public IReadOnlyList<PlanningLayer> Layers { get; }

    public static KnapsackCore Of(IReadOnlyList<PlanningLayer> layers, LagrangeBound bound)
    {
        var kept = new PlanningLayer[layers.Count];
        var indices = new int[layers.Count][];
        for (int layer = 0; layer < layers.Count; layer++)
        {
            IReadOnlyList<PlanningChoice> choices = layers[layer].Choices;
            var admitted = new List<int>(choices.Count);
            for (int c = 0; c < choices.Count; c++)
            {
                if (bound.Admits(layer, choices[c]))
                {
                    admitted.Add(c);
                }
            }

            // Rounding can leave a layer with nothing (its best choice has reduced cost 0 against a gap of 0):
            // then every choice stays, which is never wrong, only slower.
            if (admitted.Count == 0)
            {
                admitted.AddRange(Enumerable.Range(0, choices.Count));
            }

            indices[layer] = admitted.ToArray();
            kept[layer] = admitted.Count == choices.Count ? layers[layer] : layers[layer] with { Choices = admitted.Select(c => choices[c]).ToList() };
        }

        return new KnapsackCore(kept, indices);
    }

    /// <summary>A selection over the core, with its choice indices mapped back to the original layers' choices.</summary>
    public Selection Original(Selection core)
    {
        var choice = new int[core.ChoiceIndex.Count];
        for (int layer = 0; layer < choice.Length; layer++)
        {
            choice[layer] = _originalIndex[layer][core.ChoiceIndex[layer]];
        }

        return core with { ChoiceIndex = choice };
    }
}
