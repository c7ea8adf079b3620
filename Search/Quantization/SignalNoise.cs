using System.Numerics.Tensors;

namespace Bitbudget.Search.Quantization;

/// <summary>Signal-to-quantization-noise measures of an approximation against its reference.</summary>
public static class SignalNoise
{
    private const int Block = 1024;

    /// <summary>Sum of (reference - approx)^2, accumulated in double.</summary>
    public static double SquaredError(ReadOnlySpan<float> reference, ReadOnlySpan<float> approx)
    {
        if (reference.Length != approx.Length)
        {
            throw new ArgumentException("Both spans must have the same length.", nameof(approx));
        }

        Span<float> difference = stackalloc float[Block];
        double sum = 0;
        for (int start = 0; start < reference.Length; start += Block)
        {
            int count = Math.Min(Block, reference.Length - start);
            TensorPrimitives.Subtract(reference.Slice(start, count), approx.Slice(start, count), difference[..count]);
            sum += TensorPrimitives.SumOfSquares(difference[..count]);
        }

        return sum;
    }

    /// <summary>
    /// SQNR in dB: 10 log10(sum reference^2 / sum (reference - approx)^2); +infinity when the approximation is
    /// exact.
    /// </summary>
    public static double SqnrDb(ReadOnlySpan<float> reference, ReadOnlySpan<float> approx)
    {
        double noise = SquaredError(reference, approx);
        double signal = 0;
        for (int start = 0; start < reference.Length; start += Block)
        {
            signal += TensorPrimitives.SumOfSquares(reference.Slice(start, Math.Min(Block, reference.Length - start)));
        }

        return noise == 0 ? double.PositiveInfinity : 10 * Math.Log10(signal / noise);
    }
}
