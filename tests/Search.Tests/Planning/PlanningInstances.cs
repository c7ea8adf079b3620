using Bitbudget.Search.Planning;

namespace Bitbudget.Search.Tests.Planning;

/// <summary>Random planning instances with fixed seeds, and an exhaustive reference over small ones.</summary>
internal static class PlanningInstances
{
    private static readonly int[] Widths = [2, 3, 4, 5, 6, 8, 16, 32];

    /// <summary>
    /// Layers shaped like real ones: bytes ~ parameters x bits / 8 plus per-channel scales, error
    /// falling about 4x per extra bit, with jitter, occasional non-monotone steps and, when
    /// <paramref name="integerErrors"/>, integer-valued errors so an integer solver sees the same numbers.
    /// </summary>
    public static List<PlanningLayer> Realistic(int seed, int layerCount, int choiceCount, bool integerErrors, int minParameters = 1_000, int maxParameters = 1_000_000)
    {
        var random = new Random(seed);
        var layers = new List<PlanningLayer>(layerCount);
        for (int i = 0; i < layerCount; i++)
        {
            long parameters = (long)Math.Round(minParameters * Math.Pow((double)maxParameters / minParameters, random.NextDouble()));
            long channels = Math.Max(1, parameters / (9 * (1 + random.Next(64))));
            int[] bits = PickWidths(random, choiceCount);
            double baseError = Math.Pow(10, -1 - (3 * random.NextDouble()));
            var choices = new List<PlanningChoice>(bits.Length);
            foreach (int b in bits)
            {
                int effective = Math.Min(b, 12);
                double error = baseError * Math.Pow(4, 2 - effective) * (0.5 + random.NextDouble());
                if (random.NextDouble() < 0.1)
                {
                    error *= 0.2; // a measured width that happens to do better than its neighbours
                }

                if (integerErrors)
                {
                    error = Math.Round(error * 1e9);
                }

                long bytes = b >= 16 ? parameters * (b / 8) : ((parameters * b) + 7) / 8 + (channels * 4);
                choices.Add(new PlanningChoice(b, bytes, error));
            }

            layers.Add(new PlanningLayer($"layer{i}", choices));
        }

        return layers;
    }

    /// <summary>Small, rough instances: few distinct values so ties and dominated choices are common.</summary>
    public static List<PlanningLayer> Rough(int seed, int layerCount, int maxChoices)
    {
        var random = new Random(seed);
        var layers = new List<PlanningLayer>(layerCount);
        for (int i = 0; i < layerCount; i++)
        {
            int count = 1 + random.Next(maxChoices);
            var choices = new List<PlanningChoice>(count);
            for (int c = 0; c < count; c++)
            {
                double error = seed % 2 == 0 ? random.Next(0, 12) : Math.Round(random.NextDouble() * 3, 3);
                choices.Add(new PlanningChoice(2 + c, random.Next(0, 15), error));
            }

            layers.Add(new PlanningLayer($"l{i}", choices));
        }

        return layers;
    }

    /// <summary>Every assignment with its bytes and its error summed in layer order.</summary>
    public static List<(int[] Choice, long Bytes, double Error)> Enumerate(IReadOnlyList<PlanningLayer> layers)
    {
        var all = new List<(int[], long, double)>();
        var index = new int[layers.Count];
        while (true)
        {
            long bytes = 0;
            double error = 0;
            for (int i = 0; i < layers.Count; i++)
            {
                bytes += layers[i].Choices[index[i]].Bytes;
                error += layers[i].Choices[index[i]].Error;
            }

            all.Add(((int[])index.Clone(), bytes, error));
            int k = 0;
            while (k < layers.Count && ++index[k] == layers[k].Choices.Count)
            {
                index[k++] = 0;
            }

            if (k == layers.Count)
            {
                return all;
            }
        }
    }

    /// <summary>The Pareto set of (bytes, error) pairs of an enumeration, by bytes ascending.</summary>
    public static List<(long Bytes, double Error)> ParetoSet(IEnumerable<(int[] Choice, long Bytes, double Error)> all)
    {
        var result = new List<(long, double)>();
        double last = double.PositiveInfinity;
        foreach (var point in all.OrderBy(p => p.Bytes).ThenBy(p => p.Error))
        {
            if (point.Error < last)
            {
                result.Add((point.Bytes, point.Error));
                last = point.Error;
            }
        }

        return result;
    }

    /// <summary>Checks that a selection's totals are what its choices add up to, in layer order.</summary>
    public static void AssertConsistent(IReadOnlyList<PlanningLayer> layers, Selection selection)
    {
        Assert.Equal(layers.Count, selection.ChoiceIndex.Count);
        long bytes = 0;
        double error = 0;
        for (int i = 0; i < layers.Count; i++)
        {
            bytes += layers[i].Choices[selection.ChoiceIndex[i]].Bytes;
            error += layers[i].Choices[selection.ChoiceIndex[i]].Error;
        }

        Assert.Equal(bytes, selection.Bytes);
        Assert.Equal(error, selection.Error);
    }

    private static int[] PickWidths(Random random, int count)
    {
        var pool = Widths.ToList();
        while (pool.Count > count)
        {
            pool.RemoveAt(random.Next(pool.Count));
        }

        return [.. pool];
    }
}
