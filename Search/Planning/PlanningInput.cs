namespace Bitbudget.Search.Planning;

/// <summary>Checks the solvers' input once, so both solvers reject the same things with the same codes.</summary>
internal static class PlanningInput
{
    /// <summary>Back-pointers pack the choice index into 5 bits.</summary>
    public const int MaxChoicesPerLayer = 32;

    public static void Validate(IReadOnlyList<PlanningLayer> layers)
    {
        ArgumentNullException.ThrowIfNull(layers);
        for (int i = 0; i < layers.Count; i++)
        {
            PlanningLayer layer = layers[i] ?? throw new EngineException("invalid-planning-layer", $"Layer {i} of the plan is missing.");
            string name = layer.Name;
            IReadOnlyList<PlanningChoice>? choices = layer.Choices;
            if (choices is null || choices.Count == 0)
            {
                throw new EngineException("layer-without-choices", $"Layer '{name}' has no candidate bit width; give it at least one (a pinned layer has exactly one).");
            }

            if (choices.Count > MaxChoicesPerLayer)
            {
                throw new EngineException("too-many-choices", $"Layer '{name}' has {choices.Count} candidates; at most {MaxChoicesPerLayer} are supported.");
            }

            foreach (PlanningChoice c in choices)
            {
                if (c is null || c.Bytes < 0 || !double.IsFinite(c.Error) || c.Error < 0)
                {
                    throw new EngineException(
                        "invalid-choice-cost",
                        $"Layer '{name}' has a candidate with bytes {c?.Bytes} and error {c?.Error}; bytes must be >= 0 and the error a finite number >= 0.");
                }
            }
        }
    }

    /// <summary>Sum of the chosen errors in layer order, the same order the knapsack adds them in.</summary>
    public static double SumError(IReadOnlyList<PlanningLayer> layers, ReadOnlySpan<int> choiceIndex)
    {
        double sum = 0;
        for (int i = 0; i < layers.Count; i++)
        {
            sum += layers[i].Choices[choiceIndex[i]].Error;
        }

        return sum;
    }

    public static long SumBytes(IReadOnlyList<PlanningLayer> layers, ReadOnlySpan<int> choiceIndex)
    {
        long sum = 0;
        for (int i = 0; i < layers.Count; i++)
        {
            sum = checked(sum + layers[i].Choices[choiceIndex[i]].Bytes);
        }

        return sum;
    }
}
