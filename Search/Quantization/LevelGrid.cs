using System.Numerics;
using System.Runtime.CompilerServices;
using System.Runtime.InteropServices;

namespace Bitbudget.Search.Quantization;

/// <summary>
/// A uniform set of reconstruction levels (k + Offset) * step for integers k in [Lowest, Highest]. Offset 0
/// describes the midtread grids the engine stores (symmetric: k in [-qmax, qmax]; asymmetric: k in
/// [qmin - z, qmax - z]); Offset 0.5 describes a midrise grid such as J. Max's (1960) uniform quantizers.
/// The clip search is written against this description so that it serves every grid alike.
/// </summary>
internal readonly record struct LevelGrid(int Lowest, int Highest, float Offset)
{
    /// <summary>The engine's grid for a bit width, scheme and (asymmetric) zero point.</summary>
    public static LevelGrid For(int bits, QuantizationScheme scheme, int zeroPoint)
    {
        var (min, max) = QuantGrid.For(bits, scheme);
        return new LevelGrid(min - zeroPoint, max - zeroPoint, 0f);
    }

    /// <summary>A midrise grid of <paramref name="levelCount"/> levels (even), symmetric around zero.</summary>
    public static LevelGrid Midrise(int levelCount) => new(-levelCount / 2, (levelCount / 2) - 1, 0.5f);

    /// <summary>Sum of (x - Q(x))^2 over the values for the given step, accumulated in double.</summary>
    public double SquaredError(ReadOnlySpan<float> values, float step)
    {
        // Float sums over short blocks, double across blocks: large samples keep their precision.
        const int Block = 1024;
        double total = 0;
        for (int start = 0; start < values.Length; start += Block)
        {
            total += BlockError(values.Slice(start, Math.Min(Block, values.Length - start)), step);
        }

        return total;
    }

    private float BlockError(ReadOnlySpan<float> values, float step)
    {
        // A reciprocal multiply instead of the division the storage kernels use: only ties can differ,
        // and they carry the same error either way.
        float inverse = 1f / step;
        float low = Lowest, high = Highest, offset = Offset;
        ref float src = ref MemoryMarshal.GetReference(values);
        float sum = 0f;
        int i = 0;
        if (Vector.IsHardwareAccelerated && values.Length >= Vector<float>.Count)
        {
            var inv = new Vector<float>(inverse);
            var s = new Vector<float>(step);
            var lo = new Vector<float>(low);
            var hi = new Vector<float>(high);
            var off = new Vector<float>(offset);
            var acc = Vector<float>.Zero;
            int last = values.Length - Vector<float>.Count;
            for (; i <= last; i += Vector<float>.Count)
            {
                var x = Vector.LoadUnsafe(ref src, (nuint)i);
                var k = Vector.Min(Vector.Max(Vector.Round((x * inv) - off), lo), hi);
                var e = x - ((k + off) * s);
                acc += e * e;
            }

            sum = Vector.Sum(acc);
        }

        for (; i < values.Length; i++)
        {
            float x = Unsafe.Add(ref src, i);
            float k = Math.Clamp(MathF.Round((x * inverse) - offset), low, high);
            float e = x - ((k + offset) * step);
            sum += e * e;
        }

        return sum;
    }
}
