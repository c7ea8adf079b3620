namespace Bitbudget.Search.Tests.Quantization;

/// <summary>Seeded random samples for the quantization tests.</summary>
internal static class Samples
{
    /// <summary>Standard normal samples by the Box-Muller transform.</summary>
    public static float[] Gaussian(int count, int seed, double sigma = 1)
    {
        var random = new Random(seed);
        var values = new float[count];
        for (int i = 0; i < count; i += 2)
        {
            double u1 = 1 - random.NextDouble();
            double u2 = random.NextDouble();
            double radius = Math.Sqrt(-2 * Math.Log(u1));
            values[i] = (float)(sigma * radius * Math.Cos(2 * Math.PI * u2));
            if (i + 1 < count)
            {
                values[i + 1] = (float)(sigma * radius * Math.Sin(2 * Math.PI * u2));
            }
        }

        return values;
    }

    /// <summary>Laplace(0, b) samples by inverting the distribution function.</summary>
    public static float[] Laplace(int count, int seed, double b)
    {
        var random = new Random(seed);
        var values = new float[count];
        for (int i = 0; i < count; i++)
        {
            double u = random.NextDouble() - 0.5;
            values[i] = (float)(-b * Math.Sign(u) * Math.Log(Math.Max(1 - (2 * Math.Abs(u)), 1e-300)));
        }

        return values;
    }

    /// <summary>Uniform samples on [low, high).</summary>
    public static float[] Uniform(int count, int seed, float low, float high)
    {
        var random = new Random(seed);
        var values = new float[count];
        for (int i = 0; i < count; i++)
        {
            values[i] = low + ((high - low) * random.NextSingle());
        }

        return values;
    }

    public static int[] Bits(float[] values) => values.Select(BitConverter.SingleToInt32Bits).ToArray();

    public static long Count(long[] shape) => shape.Aggregate(1L, (a, b) => a * b);
}
