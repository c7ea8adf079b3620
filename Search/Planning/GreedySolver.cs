namespace Bitbudget.Search.Planning;

/// <summary>
/// Greedy bit-width search over the additive error model: every layer starts at its least-error
/// choice, then the single downward step with the least error added per byte saved is taken, again
/// and again. A step may go from a layer's current choice to any choice with fewer bytes, so a layer
/// whose middle width is a poor trade is not stuck behind it; a step that lowers the error (a
/// measured non-monotone profile) counts as free and is taken first. Ties go to the lower layer index,
/// then to the higher bit width. Fast and usually close to the knapsack, never better than it.
/// </summary>
public static class GreedySolver
{
    /// <summary>
    /// Steps down while some step keeps the summed error at or below <paramref name="maxError"/>.
    /// When even the least-error start exceeds the budget, that start is returned (its Error tells).
    /// </summary>
    public static Selection MinimumBytes(IReadOnlyList<PlanningLayer> layers, double maxError)
    {
        PlanningInput.Validate(layers);
        if (double.IsNaN(maxError))
        {
            throw new EngineException("invalid-error-budget", "The error budget is not a number.");
        }

        return Run(layers, maxError, maxBytes: null);
    }

    /// <summary>
    /// Steps down until the bytes are at most <paramref name="maxBytes"/>, then stops. When even the
    /// smallest choice everywhere exceeds it, that smallest assignment is returned (its Bytes tell).
    /// </summary>
    public static Selection MinimumError(IReadOnlyList<PlanningLayer> layers, long maxBytes)
    {
        PlanningInput.Validate(layers);
        return Run(layers, double.PositiveInfinity, maxBytes);
    }

    private static Selection Run(IReadOnlyList<PlanningLayer> layers, double maxError, long? maxBytes)
    {
        int layerCount = layers.Count;
        var order = new int[layerCount][];
        var position = new int[layerCount];
        var choice = new int[layerCount];
        for (int i = 0; i < layerCount; i++)
        {
            order[i] = ByBytesDescending(layers[i].Choices);
            position[i] = LeastErrorPosition(layers[i].Choices, order[i]);
            choice[i] = order[i][position[i]];
        }

        long bytes = PlanningInput.SumBytes(layers, choice);
        double error = PlanningInput.SumError(layers, choice);
        bool errorMode = maxBytes is null;
        if (errorMode ? error > maxError : bytes <= maxBytes!.Value)
        {
            return new Selection(choice, bytes, error);
        }

        // Steps whose incremental check passed but whose layer-order sum landed a rounding step over
        // the budget; they are never tried again.
        HashSet<(int Layer, int Position)>? refused = null;
        while (true)
        {
            int bestLayer = -1, bestPosition = -1;
            double bestRatio = double.PositiveInfinity;
            for (int i = 0; i < layerCount; i++)
            {
                IReadOnlyList<PlanningChoice> choices = layers[i].Choices;
                PlanningChoice at = choices[choice[i]];
                for (int p = position[i] + 1; p < order[i].Length; p++)
                {
                    PlanningChoice to = choices[order[i][p]];
                    if (to.Bytes >= at.Bytes)
                    {
                        continue;
                    }

                    double added = to.Error - at.Error;
                    if (errorMode && error + added > maxError)
                    {
                        continue;
                    }

                    double ratio = added / (at.Bytes - to.Bytes);
                    if (ratio < bestRatio && (refused is null || !refused.Contains((i, p))))
                    {
                        bestRatio = ratio;
                        bestLayer = i;
                        bestPosition = p;
                    }
                }
            }

            if (bestLayer < 0)
            {
                break;
            }

            int previous = position[bestLayer];
            position[bestLayer] = bestPosition;
            choice[bestLayer] = order[bestLayer][bestPosition];
            double summed = PlanningInput.SumError(layers, choice);
            if (errorMode && summed > maxError)
            {
                position[bestLayer] = previous;
                choice[bestLayer] = order[bestLayer][previous];
                (refused ??= []).Add((bestLayer, bestPosition));
                continue;
            }

            error = summed;
            bytes = PlanningInput.SumBytes(layers, choice);
            if (!errorMode && bytes <= maxBytes!.Value)
            {
                break;
            }
        }

        return new Selection(choice, bytes, error);
    }

    /// <summary>Choice indices by bytes descending, then bits descending, then index.</summary>
    private static int[] ByBytesDescending(IReadOnlyList<PlanningChoice> choices)
    {
        var order = new int[choices.Count];
        for (int i = 0; i < order.Length; i++)
        {
            order[i] = i;
        }

        Array.Sort(order, (a, b) =>
        {
            int c = choices[b].Bytes.CompareTo(choices[a].Bytes);
            if (c == 0) c = choices[b].Bits.CompareTo(choices[a].Bits);
            return c == 0 ? a.CompareTo(b) : c;
        });
        return order;
    }

    /// <summary>Where the least-error choice sits in <paramref name="order"/>; among equal errors the one with fewer bytes.</summary>
    private static int LeastErrorPosition(IReadOnlyList<PlanningChoice> choices, int[] order)
    {
        int best = 0;
        for (int p = 1; p < order.Length; p++)
        {
            PlanningChoice c = choices[order[p]], b = choices[order[best]];
            if (c.Error < b.Error || (c.Error == b.Error && c.Bytes < b.Bytes))
            {
                best = p;
            }
        }

        return best;
    }
}
