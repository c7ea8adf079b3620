using Bitbudget.Search.Quantization;
using DataType = Onnx.TensorProto.Types.DataType;

namespace Bitbudget.Search.Tests.Quantization;

/// <summary>
/// Our levels and dequantized values against ONNX Runtime's own QuantizeLinear / DequantizeLinear operators
/// (Microsoft.ML.OnnxRuntime 1.31.1, CPU provider; ONNX operator spec: saturate(round_half_even(x / s) + z),
/// y = (q - z) * s), compared bit for bit.
/// </summary>
public class OnnxRuntimeAgreementTests
{
    public static TheoryData<long[], int> Axes => new()
    {
        { new long[] { 6, 3, 3, 3 }, 0 },  // Conv [M, C, kh, kw]
        { new long[] { 4, 5, 3, 3 }, 1 },  // ConvTranspose [C, M, kh, kw]
        { new long[] { 33, 7 }, 1 },       // MatMul [K, N], last axis
    };

    [Theory]
    [MemberData(nameof(Axes))]
    public void Int8SymmetricPerAxisLevelsAndValuesMatchOnnxRuntimeBitForBit(long[] shape, int axis)
    {
        var setting = new LayerSetting(8, QuantizationScheme.Symmetric, Granularity.PerChannel, ClipMethod.MinMax);
        float[] weights = TiedWeights(shape, axis, setting, seed: 11);
        AssertMatchesOnnxRuntime(weights, shape, axis, setting, DataType.Int8, opset: 13);
    }

    [Theory]
    [MemberData(nameof(Axes))]
    public void Uint8AsymmetricPerAxisLevelsAndValuesMatchOnnxRuntimeBitForBit(long[] shape, int axis)
    {
        var setting = new LayerSetting(8, QuantizationScheme.Asymmetric, Granularity.PerChannel, ClipMethod.MinMax);
        float[] weights = TiedWeights(shape, axis, setting, seed: 12);
        AssertMatchesOnnxRuntime(weights, shape, axis, setting, DataType.Uint8, opset: 13);
    }

    [Theory]
    [MemberData(nameof(Axes))]
    public void Int4SymmetricPerAxisAtOpset21MatchesOnnxRuntimeBitForBit(long[] shape, int axis)
    {
        var setting = new LayerSetting(4, QuantizationScheme.Symmetric, Granularity.PerChannel, ClipMethod.MinMax);
        float[] weights = TiedWeights(shape, axis, setting, seed: 13);
        AssertMatchesOnnxRuntime(weights, shape, axis, setting, DataType.Int4, opset: 21);
    }

    [Theory]
    [MemberData(nameof(Axes))]
    public void Uint4AsymmetricPerAxisAtOpset21MatchesOnnxRuntimeBitForBit(long[] shape, int axis)
    {
        var setting = new LayerSetting(4, QuantizationScheme.Asymmetric, Granularity.PerChannel, ClipMethod.MinMax);
        float[] weights = TiedWeights(shape, axis, setting, seed: 14);
        AssertMatchesOnnxRuntime(weights, shape, axis, setting, DataType.Uint4, opset: 21);
    }

    [Theory]
    [InlineData(8, QuantizationScheme.Symmetric, DataType.Int8, 13)]
    [InlineData(8, QuantizationScheme.Asymmetric, DataType.Uint8, 13)]
    [InlineData(4, QuantizationScheme.Symmetric, DataType.Int4, 21)]
    [InlineData(4, QuantizationScheme.Asymmetric, DataType.Uint4, 21)]
    public void PerTensorTiesMatchOnnxRuntimeBitForBit(int bits, QuantizationScheme scheme, DataType type, int opset)
    {
        var setting = new LayerSetting(bits, scheme, Granularity.PerTensor, ClipMethod.MinMax);
        long[] shape = [5, 4, 3, 3];
        float[] weights = TiedWeights([1, 180], 0, setting with { Granularity = Granularity.PerChannel }, seed: 15);
        AssertMatchesOnnxRuntime(weights, shape, -1, setting, type, opset);
    }

    /// <summary>Clipped calibrations leave values beyond the clip; they must saturate exactly as ORT's do.</summary>
    [Theory]
    [InlineData(8, QuantizationScheme.Symmetric, ClipMethod.Percentile, DataType.Int8, 13)]
    [InlineData(8, QuantizationScheme.Asymmetric, ClipMethod.MseOptimal, DataType.Uint8, 13)]
    [InlineData(4, QuantizationScheme.Symmetric, ClipMethod.AnalyticLaplace, DataType.Int4, 21)]
    [InlineData(4, QuantizationScheme.Asymmetric, ClipMethod.Percentile, DataType.Uint4, 21)]
    [InlineData(3, QuantizationScheme.Asymmetric, ClipMethod.AnalyticGaussian, DataType.Uint4, 21)]
    public void ValuesBeyondTheClipSaturateAsInOnnxRuntime(int bits, QuantizationScheme scheme, ClipMethod clip, DataType type, int opset)
    {
        var setting = new LayerSetting(bits, scheme, Granularity.PerChannel, clip, Percentile: 95);
        long[] shape = [8, 3, 5, 5];
        float[] weights = Samples.Laplace((int)Samples.Count(shape), seed: 16, b: 0.05);
        var quantized = WeightQuantizer.Quantize(weights, shape, 0, setting);
        var (qmin, qmax) = QuantGrid.For(bits, scheme);
        Assert.Contains(quantized.Levels, q => q == qmin || q == qmax);
        AssertMatchesOnnxRuntime(weights, shape, 0, setting, type, opset);
    }

    /// <summary>The kernel with a scale that is not a power of two, ties at (k + 0.5) s and values far beyond the grid.</summary>
    [Theory]
    [InlineData(0.0137f, 0, DataType.Int8)]
    [InlineData(0.0137f, 131, DataType.Uint8)]
    [InlineData(3.3e-5f, 7, DataType.Uint8)]
    public void KernelMatchesOnnxRuntimeForArbitraryScalesAndZeroPoints(float scale, int zeroPoint, DataType type)
    {
        var random = new Random(17);
        var x = new float[1003];
        for (int i = 0; i < x.Length; i++)
        {
            int k = random.Next(-300, 300);
            x[i] = (i % 3) switch
            {
                0 => (k + 0.5f) * scale,
                1 => k * scale * 1.37f,
                _ => (random.NextSingle() - 0.5f) * 600 * scale,
            };
        }

        var (qmin, qmax) = type == DataType.Int8 ? (-128, 127) : (0, 255);
        var levels = new int[x.Length];
        var fake = new float[x.Length];
        Bitbudget.Search.Quantization.QuantKernels.Quantize(x, scale, zeroPoint, qmin, qmax, levels);
        Bitbudget.Search.Quantization.QuantKernels.FakeQuantize(x, scale, zeroPoint, qmin, qmax, fake);
        var (expectedLevels, expectedValues) = QdqReferenceModels.QuantizeDequantize(
            x, [x.Length], [scale], [zeroPoint], -1, type, 13);

        Assert.Equal(expectedLevels, levels);
        Assert.Equal(Samples.Bits(expectedValues), Samples.Bits(fake));
        Assert.Contains(levels, q => q == qmin);
        Assert.Contains(levels, q => q == qmax);
    }

    private static void AssertMatchesOnnxRuntime(float[] weights, long[] shape, int axis, LayerSetting setting, DataType type, int opset)
    {
        var quantized = WeightQuantizer.Quantize(weights, shape, axis, setting);
        var (qmin, qmax) = QuantGrid.For(setting.Bits, setting.Scheme);
        var (ortLevels, ortValues) = QdqReferenceModels.QuantizeDequantize(
            weights, shape, quantized.Scales, quantized.ZeroPoints, quantized.Axis, type, opset);

        // ORT saturates to the full range of the storage type (-128 for int8, -8 for int4, 15 for a 3-bit grid
        // stored as uint4); our grid can be narrower, so ORT's levels are clamped to it. Where the grid fills
        // the type (asymmetric at the type's own width) the levels and values must agree without any clamping.
        int[] expected = ortLevels.Select(q => Math.Clamp(q, qmin, qmax)).ToArray();
        Assert.Equal(expected, quantized.Levels);
        bool gridFillsType = setting.Scheme == QuantizationScheme.Asymmetric && setting.Bits == (type == DataType.Uint8 ? 8 : 4);
        if (gridFillsType)
        {
            Assert.Equal(ortLevels, quantized.Levels);
        }

        var dequantized = new float[weights.Length];
        WeightQuantizer.Dequantize(quantized, shape, dequantized);
        float[] ortDequantized = QdqReferenceModels.Dequantize(
            quantized.Levels, shape, quantized.Scales, quantized.ZeroPoints, quantized.Axis, type, opset);
        Assert.Equal(Samples.Bits(ortDequantized), Samples.Bits(dequantized));

        var fake = new float[weights.Length];
        WeightQuantizer.FakeQuantize(weights, shape, axis, setting, fake);
        Assert.Equal(Samples.Bits(ortDequantized), Samples.Bits(fake));
        if (gridFillsType)
        {
            Assert.Equal(Samples.Bits(ortValues), Samples.Bits(fake));
        }
    }

    /// <summary>
    /// Per channel a power-of-two step s, the min-max range pinned to whole multiples of s (so calibration
    /// returns exactly s), and most values at exact ties (k + 0.5) s.
    /// </summary>
    private static float[] TiedWeights(long[] shape, int axis, LayerSetting setting, int seed)
    {
        var random = new Random(seed);
        var (qmin, qmax) = QuantGrid.For(setting.Bits, setting.Scheme);
        long outer = shape.Take(axis).Aggregate(1L, (a, b) => a * b);
        long channels = shape[axis];
        long inner = shape.Skip(axis + 1).Aggregate(1L, (a, b) => a * b);
        var weights = new float[outer * channels * inner];
        for (long c = 0; c < channels; c++)
        {
            float step = MathF.ScaleB(1f, -random.Next(3, 12));
            int zero = setting.Scheme == QuantizationScheme.Symmetric ? 0 : random.Next(qmin + 1, qmax);
            int lowest = qmin - zero, highest = qmax - zero;
            for (long o = 0; o < outer; o++)
            {
                for (long i = 0; i < inner; i++)
                {
                    long at = (((o * channels) + c) * inner) + i;
                    weights[at] = random.Next(4) == 0
                        ? (lowest + ((highest - lowest) * random.NextSingle())) * step
                        : (random.Next(lowest, highest) + 0.5f) * step;
                }
            }

            // Pin the channel's range: the first two elements of the channel hold the grid's end points.
            long first = c * inner, second = first + (inner > 1 ? 1 : channels * inner);
            weights[first] = highest * step;
            weights[second] = lowest * step;
        }

        return weights;
    }
}
