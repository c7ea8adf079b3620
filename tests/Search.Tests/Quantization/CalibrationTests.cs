using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Tests.Quantization;

public class CalibrationTests
{
    [Theory]
    [InlineData(2, -1, 1)]
    [InlineData(4, -7, 7)]
    [InlineData(8, -127, 127)]
    public void SymmetricGridIsNarrowSigned(int bits, int min, int max) =>
        Assert.Equal((min, max), QuantGrid.For(bits, QuantizationScheme.Symmetric));

    [Theory]
    [InlineData(2, 3)]
    [InlineData(4, 15)]
    [InlineData(8, 255)]
    public void AsymmetricGridIsUnsigned(int bits, int max) =>
        Assert.Equal((0, max), QuantGrid.For(bits, QuantizationScheme.Asymmetric));

    [Theory]
    [InlineData(1)]
    [InlineData(9)]
    [InlineData(16)]
    public void GridOutsideTwoToEightBitsThrows(int bits) =>
        Assert.Throws<ArgumentOutOfRangeException>(() => QuantGrid.For(bits, QuantizationScheme.Symmetric));

    /// <summary>Linear interpolation between order statistics, NumPy's default percentile rule.</summary>
    [Fact]
    public void PercentileInterpolatesBetweenOrderStatistics()
    {
        // |w| = 0..100 shuffled with signs: the 99th percentile of |w| is 99, the 99.5th is 99.5.
        var random = new Random(51);
        float[] w = Enumerable.Range(0, 101).Select(i => i % 2 == 0 ? (float)i : -i).OrderBy(_ => random.Next()).ToArray();
        Assert.Equal(new ClipRange(-99f, 99f), ClipCalibrator.Calibrate(w, new LayerSetting(8, Clip: ClipMethod.Percentile, Percentile: 99)));
        Assert.Equal(new ClipRange(-99.5f, 99.5f), ClipCalibrator.Calibrate(w, new LayerSetting(8, Clip: ClipMethod.Percentile, Percentile: 99.5)));

        // Asymmetric: values 10..110 give low/high percentiles 11 and 109 at 99%, then zero joins the range.
        float[] shifted = Enumerable.Range(10, 101).Select(i => (float)i).Reverse().ToArray();
        var setting = new LayerSetting(8, QuantizationScheme.Asymmetric, Clip: ClipMethod.Percentile, Percentile: 99);
        Assert.Equal(new ClipRange(0f, 109f), ClipCalibrator.Calibrate(shifted, setting));
    }

    [Fact]
    public void MinMaxRangesCoverTheDataAndZero()
    {
        float[] w = [0.5f, 2f, 1.25f];
        Assert.Equal(new ClipRange(-2f, 2f), ClipCalibrator.Calibrate(w, new LayerSetting(4)));
        Assert.Equal(new ClipRange(0f, 2f), ClipCalibrator.Calibrate(w, new LayerSetting(4, QuantizationScheme.Asymmetric)));
        Assert.Equal(new ClipRange(-3f, 0f), ClipCalibrator.Calibrate([-3f, -1f], new LayerSetting(4, QuantizationScheme.Asymmetric)));
    }

    /// <summary>
    /// One outlier 15 times the spread: min-max wastes the grid on it, the MSE search clips it, for both schemes.
    /// </summary>
    [Theory]
    [InlineData(QuantizationScheme.Symmetric)]
    [InlineData(QuantizationScheme.Asymmetric)]
    public void MseOptimalClipCutsAnOutlierAndBeatsMinMax(QuantizationScheme scheme)
    {
        float[] w = Samples.Gaussian(4096, seed: 52, sigma: 0.02);
        w[100] = 0.3f;
        var mse = new LayerSetting(4, scheme, Granularity.PerTensor, ClipMethod.MseOptimal);
        var minMax = mse with { Clip = ClipMethod.MinMax };
        var range = ClipCalibrator.Calibrate(w, mse);
        Assert.InRange(range.High, 0.03f, 0.2f);

        var a = new float[w.Length];
        var b = new float[w.Length];
        WeightQuantizer.FakeQuantize(w, [w.Length], 0, mse, a);
        WeightQuantizer.FakeQuantize(w, [w.Length], 0, minMax, b);
        Assert.True(SignalNoise.SquaredError(w, a) < 0.5 * SignalNoise.SquaredError(w, b));
    }

    [Fact]
    public void SqnrOfKnownSignalsIsExact()
    {
        Assert.Equal(10 * Math.Log10(4), SignalNoise.SqnrDb([1f, 1f, 1f, 1f], [1f, 1f, 1f, 0f]), 12);
        Assert.Equal(double.PositiveInfinity, SignalNoise.SqnrDb([1f, 2f], [1f, 2f]));
        Assert.Equal(0.25 + 1, SignalNoise.SquaredError([1f, 2f, 3f], [1.5f, 2f, 2f]));
    }

    [Theory]
    [InlineData("Conv", 4, false, 0)]
    [InlineData("ConvTranspose", 4, false, 1)]
    [InlineData("Gemm", 2, false, 1)]
    [InlineData("Gemm", 2, true, 0)]
    [InlineData("MatMul", 2, false, 1)]
    [InlineData("MatMul", 3, false, 2)]
    public void OutputChannelAxisFollowsTheOperatorWeightLayout(string op, int rank, bool transB, int axis) =>
        Assert.Equal(axis, OutputChannelAxis.For(op, rank, transB));

    [Fact]
    public void OutputChannelAxisRefusesOtherOperators() =>
        Assert.Equal("operator-not-quantizable", Assert.Throws<EngineException>(() => OutputChannelAxis.For("Add", 2)).Code);
}
