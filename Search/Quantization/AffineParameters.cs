namespace Bitbudget.Search.Quantization;

/// <summary>Scale and zero point of a clipping range on a bit width's integer grid.</summary>
internal static class AffineParameters
{
    /// <summary>
    /// Symmetric: s = clip / qmax, z = 0. Asymmetric: the range is widened to contain 0, s = (hi - lo) /
    /// (qmax - qmin), z = clamp(round(qmin - lo / s)). An empty range (all-zero channel) gets s = 1 so that
    /// every level is z and nothing divides by zero.
    /// </summary>
    public static (float Scale, int ZeroPoint) From(ClipRange range, int bits, QuantizationScheme scheme)
    {
        var (qmin, qmax) = QuantGrid.For(bits, scheme);
        if (scheme == QuantizationScheme.Symmetric)
        {
            float clip = Math.Max(Math.Abs(range.Low), Math.Abs(range.High));
            float s = clip / qmax;
            return (float.IsNormal(s) ? s : 1f, 0);
        }

        float low = Math.Min(range.Low, 0f);
        float high = Math.Max(range.High, 0f);
        float scale = (float)(((double)high - low) / (qmax - qmin));
        if (!float.IsNormal(scale))
        {
            return (1f, qmin);
        }

        int zeroPoint = (int)Math.Clamp(MathF.Round(qmin - (low / scale)), qmin, qmax);
        return (scale, zeroPoint);
    }
}
