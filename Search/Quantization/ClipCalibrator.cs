using System.Buffers;
using System.Numerics.Tensors;

namespace Bitbudget.Search.Quantization;

/// <summary>
/// Chooses the clipping range of one channel (or a whole tensor) for a setting's clip method, scheme and bit
/// width. Symmetric ranges come back as [-clip, clip]; asymmetric ranges always contain zero so that real
/// zero stays exactly representable.
/// </summary>
public static class ClipCalibrator
{
    /// <summary>The clipping range of <paramref name="values"/>; an empty or all-zero input gives [0, 0].</summary>
    public static ClipRange Calibrate(ReadOnlySpan<float> values, LayerSetting setting)
    {
        ArgumentNullException.ThrowIfNull(setting);
        if (values.IsEmpty)
        {
            return default;
        }

        float min = TensorPrimitives.Min(values);
        float max = TensorPrimitives.Max(values);
        if (!float.IsFinite(min) || !float.IsFinite(max))
        {
            throw new EngineException("weight-not-finite", "The weight holds NaN or infinite values; export the model again from a run without diverged weights.");
        }

        bool symmetric = setting.Scheme == QuantizationScheme.Symmetric;
        float absMax = Math.Max(Math.Abs(min), Math.Abs(max));
        return setting.Clip switch
        {
            ClipMethod.MinMax => symmetric ? new ClipRange(-absMax, absMax) : WithZero(min, max),
            ClipMethod.Percentile => Percentile(values, setting.Percentile, symmetric),
            ClipMethod.MseOptimal => MseOptimal(values, setting.Bits, setting.Scheme, min, max, absMax),
            ClipMethod.AnalyticLaplace or ClipMethod.AnalyticGaussian => Analytic(values, setting, min, max, absMax),
            _ => throw new EngineException("clip-method-unknown", $"Clip method '{setting.Clip}' is not one the engine knows."),
        };
    }

    private static ClipRange WithZero(float low, float high) => new(Math.Min(low, 0f), Math.Max(high, 0f));

    private static ClipRange Percentile(ReadOnlySpan<float> values, double percent, bool symmetric)
    {
        CheckPercentile(percent);
        float[] rented = ArrayPool<float>.Shared.Rent(values.Length);
        try
        {
            Span<float> sorted = rented.AsSpan(0, values.Length);
            if (symmetric)
            {
                TensorPrimitives.Abs(values, sorted);
                sorted.Sort();
                float clip = Quantile(sorted, percent);
                return new ClipRange(-clip, clip);
            }

            values.CopyTo(sorted);
            sorted.Sort();
            return WithZero(Quantile(sorted, 100 - percent), Quantile(sorted, percent));
        }
        finally
        {
            ArrayPool<float>.Shared.Return(rented);
        }
    }

    internal static void CheckPercentile(double percent)
    {
        if (!(percent is >= 50 and <= 100))
        {
            throw new EngineException("percentile-out-of-range", $"The clipping percentile must lie between 50 and 100 percent (got {percent}); 99.9 to 99.999 is common practice.");
        }
    }

    /// <summary>Linear interpolation between order statistics at rank p/100 * (n - 1).</summary>
    private static float Quantile(ReadOnlySpan<float> sorted, double percent)
    {
        double rank = percent / 100 * (sorted.Length - 1);
        int below = (int)Math.Floor(rank);
        int above = Math.Min(below + 1, sorted.Length - 1);
        double weight = rank - below;
        return (float)(sorted[below] + (weight * (sorted[above] - (double)sorted[below])));
    }

    private static ClipRange MseOptimal(ReadOnlySpan<float> values, int bits, QuantizationScheme scheme, float min, float max, float absMax)
    {
        if (scheme == QuantizationScheme.Symmetric)
        {
            int qmax = QuantGrid.For(bits, scheme).Max;
            float step = MseClipSearch.FindStep(values, LevelGrid.For(bits, scheme, 0), absMax / qmax);
            float clip = Math.Min(step * qmax, absMax);
            return new ClipRange(-clip, clip);
        }

        // Shrinking [lo, hi] by one factor keeps the zero point of the min-max range (lo / s does not change),
        // so the asymmetric search is a search of the step on one fixed grid.
        var range = WithZero(min, max);
        var (widest, zeroPoint) = AffineParameters.From(range, bits, scheme);
        float best = MseClipSearch.FindStep(values, LevelGrid.For(bits, scheme, zeroPoint), widest);
        float ratio = Math.Min(best / widest, 1f);
        return new ClipRange(range.Low * ratio, range.High * ratio);
    }

    private static ClipRange Analytic(ReadOnlySpan<float> values, LayerSetting setting, float min, float max, float absMax)
    {
        double mean = ChannelStatistics.Mean(values);
        double alpha = setting.Clip == ClipMethod.AnalyticLaplace
            ? AnalyticClip.LaplaceFactor(setting.Bits) * ChannelStatistics.MeanAbsoluteDeviation(values, mean)
            : AnalyticClip.GaussianFactor(setting.Bits) * ChannelStatistics.StandardDeviation(values, mean);

        // The paper clips a zero-mean distribution to [-alpha, alpha]; weights are centred on their mean, and
        // a clip wider than the data only wastes levels.
        if (setting.Scheme == QuantizationScheme.Symmetric)
        {
            float clip = (float)Math.Min(Math.Abs(mean) + alpha, absMax);
            return new ClipRange(-clip, clip);
        }

        return WithZero((float)Math.Max(mean - alpha, min), (float)Math.Min(mean + alpha, max));
    }
}
