using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Tests.Quantization;

public class WeightQuantizerTests
{
    public static TheoryData<long[], int> Axes => new()
    {
        { new long[] { 5, 3, 2, 4 }, 0 },
        { new long[] { 5, 3, 2, 4 }, 1 },
        { new long[] { 5, 3, 2, 4 }, 2 },
        { new long[] { 5, 3, 2, 4 }, 3 },
        { new long[] { 17, 9 }, 1 },
        { new long[] { 17, 9 }, -1 },
        { new long[] { 9, 17 }, 0 },
        { new long[] { 2, 33, 7 }, 2 },
    };

    public static IEnumerable<ClipMethod> ClipMethods => Enum.GetValues<ClipMethod>();

    [Theory]
    [MemberData(nameof(Axes))]
    public void PerChannelMatchesChannelByChannelReferenceOnEveryAxis(long[] shape, int axis)
    {
        float[] weights = Samples.Laplace((int)Samples.Count(shape), seed: 31 + axis, b: 0.1);
        int normalised = axis < 0 ? axis + shape.Length : axis;
        foreach (var scheme in new[] { QuantizationScheme.Symmetric, QuantizationScheme.Asymmetric })
        {
            foreach (var clip in ClipMethods)
            {
                foreach (int bits in new[] { 2, 3, 5, 8 })
                {
                    var setting = new LayerSetting(bits, scheme, Granularity.PerChannel, clip, Percentile: 90);
                    var quantized = WeightQuantizer.Quantize(weights, shape, axis, setting);
                    var (scales, zeroPoints, levels) = SlowReference(weights, shape, normalised, setting);

                    Assert.Equal(normalised, quantized.Axis);
                    Assert.Equal(scales, quantized.Scales);
                    Assert.Equal(zeroPoints, quantized.ZeroPoints);
                    Assert.Equal(levels, quantized.Levels);

                    var dequantized = new float[weights.Length];
                    var fake = new float[weights.Length];
                    WeightQuantizer.Dequantize(quantized, shape, dequantized);
                    WeightQuantizer.FakeQuantize(weights, shape, axis, setting, fake);
                    long inner = shape.Skip(normalised + 1).Aggregate(1L, (a, b) => a * b);
                    for (int i = 0; i < weights.Length; i++)
                    {
                        int c = (int)(i / inner % shape[normalised]);
                        float expected = (levels[i] - zeroPoints[c]) * scales[c];
                        Assert.Equal(expected, dequantized[i]);
                        Assert.Equal(expected, fake[i]);
                    }
                }
            }
        }
    }

    [Fact]
    public void PerTensorUsesOneScaleAndAxisMinusOne()
    {
        long[] shape = [4, 6];
        float[] weights = Samples.Gaussian(24, seed: 41);
        var setting = new LayerSetting(6, QuantizationScheme.Symmetric, Granularity.PerTensor);
        var quantized = WeightQuantizer.Quantize(weights, shape, 0, setting);
        float absMax = weights.Max(MathF.Abs);
        Assert.Equal(-1, quantized.Axis);
        Assert.Equal([absMax / 31], quantized.Scales);
        Assert.Equal([0], quantized.ZeroPoints);
        Assert.Contains(quantized.Levels, q => Math.Abs(q) == 31);
    }

    [Theory]
    [InlineData(2)]
    [InlineData(3)]
    [InlineData(4)]
    [InlineData(8)]
    public void AsymmetricRealZeroMapsExactlyToZero(int bits)
    {
        long[] shape = [3, 40];
        var random = new Random(bits);
        var weights = new float[120];
        for (int i = 0; i < weights.Length; i++)
        {
            // Channel 0 all positive, channel 1 all negative, channel 2 lopsided around zero; every fifth value zero.
            int c = i / 40;
            float v = random.NextSingle();
            weights[i] = i % 5 == 0 ? 0f : c switch { 0 => 0.3f + v, 1 => -0.1f - (2 * v), _ => (v * 1.7f) - 0.2f };
        }

        foreach (var clip in ClipMethods)
        {
            var setting = new LayerSetting(bits, QuantizationScheme.Asymmetric, Granularity.PerChannel, clip, Percentile: 95);
            var fake = new float[weights.Length];
            WeightQuantizer.FakeQuantize(weights, shape, 0, setting, fake);
            var quantized = WeightQuantizer.Quantize(weights, shape, 0, setting);
            for (int i = 0; i < weights.Length; i += 5)
            {
                Assert.Equal(0, BitConverter.SingleToInt32Bits(fake[i]));
                Assert.Equal(quantized.ZeroPoints[i / 40], quantized.Levels[i]);
            }
        }
    }

    [Fact]
    public void AllZeroChannelGivesZerosAndNoNaN()
    {
        long[] shape = [3, 2, 3];
        float[] weights = Samples.Gaussian(18, seed: 43);
        Array.Clear(weights, 6, 6);
        foreach (var scheme in new[] { QuantizationScheme.Symmetric, QuantizationScheme.Asymmetric })
        {
            foreach (var clip in ClipMethods)
            {
                var setting = new LayerSetting(4, scheme, Granularity.PerChannel, clip);
                var quantized = WeightQuantizer.Quantize(weights, shape, 0, setting);
                var fake = new float[18];
                WeightQuantizer.FakeQuantize(weights, shape, 0, setting, fake);
                Assert.All(quantized.Scales, s => Assert.True(float.IsNormal(s) && s > 0));
                Assert.All(quantized.Levels.AsSpan(6, 6).ToArray(), q => Assert.Equal(quantized.ZeroPoints[1], q));
                Assert.All(fake.AsSpan(6, 6).ToArray(), v => Assert.Equal(0, BitConverter.SingleToInt32Bits(v)));
                Assert.All(fake, v => Assert.False(float.IsNaN(v)));
            }
        }
    }

    [Fact]
    public void EmptyWeightQuantizesToNothing()
    {
        var quantized = WeightQuantizer.Quantize([], [0, 4], 1, new LayerSetting(8));
        Assert.Empty(quantized.Levels);
        Assert.Equal(4, quantized.Scales.Length);
    }

    [Fact]
    public void Float16MatchesHalfConversionAndFloat32IsIdentity()
    {
        long[] shape = [7, 11, 13];
        float[] weights = Samples.Gaussian(1001, seed: 44, sigma: 3);
        weights[5] = 1e-6f;
        var half = new float[weights.Length];
        var copy = new float[weights.Length];
        WeightQuantizer.FakeQuantize(weights, shape, 0, new LayerSetting(BitWidths.Float16), half);
        WeightQuantizer.FakeQuantize(weights, shape, 0, LayerSetting.KeepFloat32, copy);
        Assert.Equal(weights.Select(w => (float)(Half)w), half);
        Assert.Equal(Samples.Bits(weights), Samples.Bits(copy));
        Assert.Contains(weights, w => (float)(Half)w != w);
    }

    [Fact]
    public void FakeQuantizeMayWriteIntoItsOwnInput()
    {
        long[] shape = [6, 5];
        float[] weights = Samples.Gaussian(30, seed: 45);
        var setting = new LayerSetting(3, QuantizationScheme.Asymmetric, Granularity.PerChannel, ClipMethod.MseOptimal);
        var expected = new float[30];
        WeightQuantizer.FakeQuantize(weights, shape, 1, setting, expected);
        WeightQuantizer.FakeQuantize(weights, shape, 1, setting, weights);
        Assert.Equal(expected, weights);
    }

    [Fact]
    public void BadInputThrowsEngineExceptionsWithStableCodes()
    {
        float[] w = [0.1f, -0.2f, 0.3f, 0.4f];
        long[] shape = [2, 2];
        var output = new float[4];
        Assert.Equal("bit-width-not-integer", Assert.Throws<EngineException>(() => WeightQuantizer.Quantize(w, shape, 0, new LayerSetting(16))).Code);
        Assert.Equal("bit-width-unsupported", Assert.Throws<EngineException>(() => WeightQuantizer.FakeQuantize(w, shape, 0, new LayerSetting(12), output)).Code);
        Assert.Equal("weight-shape-mismatch", Assert.Throws<EngineException>(() => WeightQuantizer.Quantize(w, [2, 3], 0, new LayerSetting(8))).Code);
        Assert.Equal("weight-shape-invalid", Assert.Throws<EngineException>(() => WeightQuantizer.Quantize(w, [-2, -2], 0, new LayerSetting(8))).Code);
        Assert.Equal("channel-axis-out-of-range", Assert.Throws<EngineException>(() => WeightQuantizer.Quantize(w, shape, 2, new LayerSetting(8))).Code);
        Assert.Equal("percentile-out-of-range", Assert.Throws<EngineException>(() => WeightQuantizer.Quantize(w, shape, 0, new LayerSetting(8, Clip: ClipMethod.Percentile, Percentile: 20))).Code);
        float[] bad = [0.1f, float.NaN, 0.3f, 0.4f];
        Assert.Equal("weight-not-finite", Assert.Throws<EngineException>(() => WeightQuantizer.FakeQuantize(bad, shape, 0, new LayerSetting(4), output)).Code);
        var quantized = WeightQuantizer.Quantize(w, shape, 0, new LayerSetting(8));
        Assert.Equal("quantized-weight-mismatch", Assert.Throws<EngineException>(() => WeightQuantizer.Dequantize(quantized, [4], output)).Code);
        Assert.Throws<ArgumentException>(() => WeightQuantizer.FakeQuantize(w, shape, 0, new LayerSetting(8), new float[3]));
    }

    /// <summary>Loops channel by channel with index arithmetic and the scalar quantization formula.</summary>
    private static (float[] Scales, int[] ZeroPoints, int[] Levels) SlowReference(float[] weights, long[] shape, int axis, LayerSetting setting)
    {
        int channels = (int)shape[axis];
        long inner = shape.Skip(axis + 1).Aggregate(1L, (a, b) => a * b);
        var (qmin, qmax) = QuantGrid.For(setting.Bits, setting.Scheme);
        var scales = new float[channels];
        var zeroPoints = new int[channels];
        var levels = new int[weights.Length];
        for (int c = 0; c < channels; c++)
        {
            var members = Enumerable.Range(0, weights.Length).Where(i => i / inner % channels == c).ToArray();
            float[] values = members.Select(i => weights[i]).ToArray();
            (scales[c], zeroPoints[c]) = AffineParameters.From(ClipCalibrator.Calibrate(values, setting), setting.Bits, setting.Scheme);
            foreach (int i in members)
            {
                double rounded = Math.Round((double)(weights[i] / scales[c]), MidpointRounding.ToEven);
                levels[i] = (int)Math.Clamp(rounded + zeroPoints[c], qmin, qmax);
            }
        }

        return (scales, zeroPoints, levels);
    }
}
