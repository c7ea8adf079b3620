using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Tests.Quantization;

/// <summary>The vector kernels against plain scalar loops, over lengths that hit every vector width and tail.</summary>
public class QuantKernelsTests
{
    public static TheoryData<int> Lengths => new() { 0, 1, 7, 8, 9, 15, 16, 17, 31, 32, 33, 1000, 1003 };

    [Theory]
    [MemberData(nameof(Lengths))]
    public void QuantizeMatchesScalarReference(int length)
    {
        float[] x = Values(length, seed: length);
        foreach (var (scale, zeroPoint, qmin, qmax) in Grids)
        {
            var levels = new int[length];
            QuantKernels.Quantize(x, scale, zeroPoint, qmin, qmax, levels);
            for (int i = 0; i < length; i++)
            {
                Assert.Equal(ReferenceLevel(x[i], scale, zeroPoint, qmin, qmax), levels[i]);
            }
        }
    }

    [Theory]
    [MemberData(nameof(Lengths))]
    public void DequantizeAndFakeQuantizeMatchScalarReference(int length)
    {
        float[] x = Values(length, seed: 100 + length);
        foreach (var (scale, zeroPoint, qmin, qmax) in Grids)
        {
            var levels = new int[length];
            var values = new float[length];
            var fake = new float[length];
            QuantKernels.Quantize(x, scale, zeroPoint, qmin, qmax, levels);
            QuantKernels.Dequantize(levels, scale, zeroPoint, values);
            QuantKernels.FakeQuantize(x, scale, zeroPoint, qmin, qmax, fake);
            for (int i = 0; i < length; i++)
            {
                float expected = (float)(ReferenceLevel(x[i], scale, zeroPoint, qmin, qmax) - zeroPoint) * scale;
                Assert.Equal(BitConverter.SingleToInt32Bits(expected), BitConverter.SingleToInt32Bits(values[i]));
                Assert.Equal(BitConverter.SingleToInt32Bits(expected), BitConverter.SingleToInt32Bits(fake[i]));
            }
        }
    }

    [Theory]
    [MemberData(nameof(Lengths))]
    public void SquaredErrorMatchesScalarReference(int length)
    {
        float[] x = Values(length, seed: 200 + length);
        foreach (var grid in new[] { new LevelGrid(-7, 7, 0f), new LevelGrid(-100, 155, 0f), LevelGrid.Midrise(8) })
        {
            const float step = 0.0375f;
            double expected = 0;
            foreach (float v in x)
            {
                double k = Math.Clamp(Math.Round((v / (double)step) - grid.Offset, MidpointRounding.ToEven), grid.Lowest, grid.Highest);
                double e = v - ((k + grid.Offset) * step);
                expected += e * e;
            }

            Assert.Equal(expected, grid.SquaredError(x, step), 1e-6 * Math.Max(1, expected));
        }
    }

    [Theory]
    [MemberData(nameof(Lengths))]
    public void HalfRoundTripMatchesDotNetHalfConversion(int length)
    {
        float[] x = Values(length, seed: 300 + length);
        if (length > 8)
        {
            // Largest half, just past it (overflow to infinity), a subnormal half, a tie between two halves.
            (x[0], x[1], x[2], x[3]) = (65504f, 65520f, 3e-7f, 1f + MathF.ScaleB(1f, -11));
        }

        var y = new float[length];
        QuantKernels.RoundTripHalf(x, y);
        for (int i = 0; i < length; i++)
        {
            Assert.Equal(BitConverter.SingleToInt32Bits((float)(Half)x[i]), BitConverter.SingleToInt32Bits(y[i]));
        }
    }

    private static IEnumerable<(float Scale, int ZeroPoint, int Min, int Max)> Grids =>
    [
        (0.01f, 0, -127, 127),
        (0.0371f, 0, -7, 7),
        (0.02f, 37, 0, 255),
        (0.15f, 1, 0, 3),
    ];

    /// <summary>Independent scalar formula: float division, round half to even in double, add z, clamp.</summary>
    private static int ReferenceLevel(float x, float scale, int zeroPoint, int qmin, int qmax)
    {
        float ratio = x / scale;
        return (int)Math.Clamp(Math.Round((double)ratio, MidpointRounding.ToEven) + zeroPoint, qmin, qmax);
    }

    /// <summary>Random values with exact ties at multiples of 0.005 and values well beyond every grid.</summary>
    private static float[] Values(int length, int seed)
    {
        var random = new Random(seed);
        var x = new float[length];
        for (int i = 0; i < length; i++)
        {
            x[i] = (i % 4) switch
            {
                0 => (random.Next(-400, 400) + 0.5f) * 0.01f,
                1 => (random.Next(-40, 40) + 0.5f) * 0.0371f,
                2 => (random.Next(-400, 400) + 0.5f) * 0.02f,
                _ => (random.NextSingle() - 0.5f) * 10f,
            };
        }

        return x;
    }
}
