using System.Numerics;
using System.Numerics.Tensors;
using System.Runtime.CompilerServices;
using System.Runtime.InteropServices;

namespace Bitbudget.Search.Quantization;

/// <summary>
/// Span kernels for one scale and zero point. The arithmetic follows ONNX Runtime's QuantizeLinear kernel
/// step for step (float division x / s, clamp to [qmin - z, qmax - z] in float, round half to even, add z)
/// so that the integers agree bit for bit with what a QDQ model computes at inference.
/// </summary>
internal static class QuantKernels
{
    public static void Quantize(ReadOnlySpan<float> values, float scale, int zeroPoint, int qmin, int qmax, Span<int> levels)
    {
        if (levels.Length != values.Length)
        {
            ThrowLength(nameof(levels));
        }

        float low = qmin - zeroPoint;
        float high = qmax - zeroPoint;
        ref float src = ref MemoryMarshal.GetReference(values);
        ref int dst = ref MemoryMarshal.GetReference(levels);
        int i = 0;
        if (Vector.IsHardwareAccelerated && values.Length >= Vector<float>.Count)
        {
            var s = new Vector<float>(scale);
            var lo = new Vector<float>(low);
            var hi = new Vector<float>(high);
            var z = new Vector<int>(zeroPoint);
            int last = values.Length - Vector<float>.Count;
            for (; i <= last; i += Vector<float>.Count)
            {
                var v = Vector.LoadUnsafe(ref src, (nuint)i) / s;
                v = Vector.Round(Vector.Min(Vector.Max(v, lo), hi));
                (Vector.ConvertToInt32(v) + z).StoreUnsafe(ref dst, (nuint)i);
            }
        }

        for (; i < values.Length; i++)
        {
            Unsafe.Add(ref dst, i) = (int)MathF.Round(Math.Clamp(Unsafe.Add(ref src, i) / scale, low, high)) + zeroPoint;
        }
    }

    public static void Dequantize(ReadOnlySpan<int> levels, float scale, int zeroPoint, Span<float> destination)
    {
        if (destination.Length != levels.Length)
        {
            ThrowLength(nameof(destination));
        }

        ref int src = ref MemoryMarshal.GetReference(levels);
        ref float dst = ref MemoryMarshal.GetReference(destination);
        int i = 0;
        if (Vector.IsHardwareAccelerated && levels.Length >= Vector<int>.Count)
        {
            var s = new Vector<float>(scale);
            var z = new Vector<int>(zeroPoint);
            int last = levels.Length - Vector<int>.Count;
            for (; i <= last; i += Vector<int>.Count)
            {
                (Vector.ConvertToSingle(Vector.LoadUnsafe(ref src, (nuint)i) - z) * s).StoreUnsafe(ref dst, (nuint)i);
            }
        }

        for (; i < levels.Length; i++)
        {
            Unsafe.Add(ref dst, i) = (Unsafe.Add(ref src, i) - zeroPoint) * scale;
        }
    }

    /// <summary>
    /// Quantize then dequantize in one pass. The rounded, clamped value is exactly q - z; it goes through an
    /// integer (as the stored level does) so that -0 becomes +0, and times s it gives the same bits as
    /// dequantizing the stored level.
    /// </summary>
    public static void FakeQuantize(ReadOnlySpan<float> values, float scale, int zeroPoint, int qmin, int qmax, Span<float> destination)
    {
        if (destination.Length != values.Length)
        {
            ThrowLength(nameof(destination));
        }

        float low = qmin - zeroPoint;
        float high = qmax - zeroPoint;
        ref float src = ref MemoryMarshal.GetReference(values);
        ref float dst = ref MemoryMarshal.GetReference(destination);
        int i = 0;
        if (Vector.IsHardwareAccelerated && values.Length >= Vector<float>.Count)
        {
            var s = new Vector<float>(scale);
            var lo = new Vector<float>(low);
            var hi = new Vector<float>(high);
            int last = values.Length - Vector<float>.Count;
            for (; i <= last; i += Vector<float>.Count)
            {
                var v = Vector.LoadUnsafe(ref src, (nuint)i) / s;
                var q = Vector.ConvertToInt32(Vector.Round(Vector.Min(Vector.Max(v, lo), hi)));
                (Vector.ConvertToSingle(q) * s).StoreUnsafe(ref dst, (nuint)i);
            }
        }

        for (; i < values.Length; i++)
        {
            Unsafe.Add(ref dst, i) = (int)MathF.Round(Math.Clamp(Unsafe.Add(ref src, i) / scale, low, high)) * scale;
        }
    }

    /// <summary>Round every value to IEEE half precision (nearest, ties to even) and back.</summary>
    public static void RoundTripHalf(ReadOnlySpan<float> values, Span<float> destination)
    {
        if (destination.Length != values.Length)
        {
            ThrowLength(nameof(destination));
        }

        const int Block = 512;
        Span<Half> half = stackalloc Half[Block];
        for (int start = 0; start < values.Length; start += Block)
        {
            int count = Math.Min(Block, values.Length - start);
            TensorPrimitives.ConvertToHalf(values.Slice(start, count), half[..count]);
            TensorPrimitives.ConvertToSingle(half[..count], destination.Slice(start, count));
        }
    }

    private static void ThrowLength(string name) =>
        throw new ArgumentException("The destination must have as many elements as the source.", name);
}
