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
    public static double MeanAbsoluteDeviation(ReadOnlySpan<float> values, double center) =>
        values.IsEmpty ? 0 : SumOfCentred(values, center, TensorPrimitives.SumOfMagnitudes) / values.Length;

    /// <summary>Population standard deviation around <paramref name="center"/>.</summary>
    public static double StandardDeviation(ReadOnlySpan<float> values, double center) =>
        values.IsEmpty ? 0 : Math.Sqrt(SumOfCentred(values, center, TensorPrimitives.SumOfSquares) / values.Length);

    /// <summary>Sums <paramref name="reduce"/> of (x - center) block by block, accumulating in double.</summary>
    private static double SumOfCentred(ReadOnlySpan<float> values, double center, Func<ReadOnlySpan<float>, float> reduce)
    {
        Span<float> centered = stackalloc float[Block];
        double sum = 0;
        for (int start = 0; start < values.Length; start += Block)
        {
            int count = Math.Min(Block, values.Length - start);
            TensorPrimitives.Subtract(values.Slice(start, count), (float)center, centered[..count]);
            sum += reduce(centered[..count]);
        }

        return sum;
    }
}
