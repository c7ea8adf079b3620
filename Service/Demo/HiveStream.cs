namespace Bitbudget.Service.Demo;

/// <summary>
/// The co-op's streaming swarm detector (invented): it hears one spectrogram column (16 bands) at a
/// time and carries two memories between calls, a fast one (12 units, Tanh) and a slow running
/// average of it, stacked as the state [2, batch, 12]. The board's sample rate (a scalar) scales the
/// input. Its weights are fixed, not trained (seeded values with the head leaning on the high bands
/// where queens pipe): it exists to show how a stateful model is fed, not to detect swarms well.
/// </summary>
internal sealed class HiveStream
{
    public const int Bands = HiveSoundSet.Bands;
    public const int Units = 12;
    public const long SampleRate = 16000;

    /// <summary>How much of the new fast memory enters the slow one per step.</summary>
    public const float SlowRate = 0.1f;

    private HiveStream(float[] inWeight, float[] fastWeight, float[] headWeight)
    {
        InWeight = inWeight;
        FastWeight = fastWeight;
        HeadWeight = headWeight;
    }

    /// <summary>[Bands, Units]: frame to fast memory.</summary>
    public float[] InWeight { get; }

    /// <summary>[Units, Units]: fast memory to itself.</summary>
    public float[] FastWeight { get; }

    /// <summary>[2 Units, 1]: both memories to the swarm logit.</summary>
    public float[] HeadWeight { get; }

    public static HiveStream Create(ulong seed)
    {
        var random = new Pcg32(seed);
        var inWeight = new float[Bands * Units];
        for (int b = 0; b < Bands; b++)
        {
            // Higher bands (where piping sits) reach the memory more strongly.
            double emphasis = 0.5 + b / (double)Bands;
            for (int u = 0; u < Units; u++) inWeight[b * Units + u] = (float)(random.NextGaussian() * emphasis / Math.Sqrt(Bands));
        }

        var fastWeight = new float[Units * Units];
        for (int i = 0; i < fastWeight.Length; i++) fastWeight[i] = (float)(random.NextGaussian() * 0.6 / Math.Sqrt(Units));

        var headWeight = new float[2 * Units];
        for (int i = 0; i < headWeight.Length; i++) headWeight[i] = (float)(random.NextGaussian() * 1.2);
        return new HiveStream(inWeight, fastWeight, headWeight);
    }

    /// <summary>One step, as the exported model computes it: returns the next fast and slow memories.</summary>
    public (float[] Fast, float[] Slow) Step(ReadOnlySpan<float> frame, ReadOnlySpan<float> fast, ReadOnlySpan<float> slow, long sampleRate)
    {
        float scale = sampleRate * (1f / SampleRate);
        var nextFast = new float[Units];
        var nextSlow = new float[Units];
        for (int u = 0; u < Units; u++)
        {
            float sum = 0;
            for (int b = 0; b < Bands; b++) sum += frame[b] * scale * InWeight[b * Units + u];
            for (int k = 0; k < Units; k++) sum += fast[k] * FastWeight[k * Units + u];
            nextFast[u] = MathF.Tanh(sum);
            nextSlow[u] = (slow[u] * (1 - SlowRate)) + (nextFast[u] * SlowRate);
        }

        return (nextFast, nextSlow);
    }
}
