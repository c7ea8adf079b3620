using System.Numerics.Tensors;

namespace Bitbudget.Search.Quantization;

/// <summary>Moments of a channel: float sums over short blocks with TensorPrimitives, double across blocks.</summary>
internal static class ChannelStatistics
{
    private const int Block = 512;

    public static double Mean(ReadOnlySpan<float> values)
    {
        if (values.IsEmpty)
        {
            return 0;
        }

        double sum = 0;
        for (int start = 0; start < values.Length; start += Block)
        {
            sum += TensorPrimitives.Sum(values.Slice(start, Math.Min(Block, values.Length - start)));
        }

        return sum / values.Length;
    }

    /// <summary>mean |x - center|, the Laplace scale estimate b that Banner et al. use.</summary>
    public static double MeanAbsoluteDeviation(ReadOnlySpan<float> values, double center)
    {
        if (values.IsEmpty)
        {
            return 0;
        }

        Span<float> centered = stackalloc float[Block];
        double sum = 0;
        for (int start = 0; start < values.Length; start += Block)
        {
            int count = Math.Min(Block, values.Length - start);
            TensorPrimitives.Subtract(values.Slice(start, count), (float)center, centered[..count]);
            sum += TensorPrimitives.SumOfMagnitudes(centered[..count]);
        }

        return sum / values.Length;
    }

    /// <summary>Population standard deviation around <paramref name="center"/>.</summary>
    public static double StandardDeviation(ReadOnlySpan<float> values, double center)
    {
        if (values.IsEmpty)
        {
            return 0;
        }

        Span<float> centered = stackalloc float[Block];
        double sum = 0;
        for (int start = 0; start < values.Length; start += Block)
        {
            int count = Math.Min(Block, values.Length - start);
            TensorPrimitives.Subtract(values.Slice(start, count), (float)center, centered[..count]);
            sum += TensorPrimitives.SumOfSquares(centered[..count]);
        }

        return Math.Sqrt(sum / values.Length);
    }
}
