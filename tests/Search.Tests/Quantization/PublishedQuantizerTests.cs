using System.Numerics.Tensors;
using Bitbudget.Search.Quantization;
using Xunit.Abstractions;

namespace Bitbudget.Search.Tests.Quantization;

/// <summary>The MSE clip search and the SQNR of min-max grids against published quantizer results.</summary>
public class PublishedQuantizerTests(ITestOutputHelper output)
{
    private static readonly Lazy<float[]> UnitGaussian = new(() => Samples.Gaussian(1_000_000, seed: 1960));

    /// <summary>
    /// J. Max (1960), "Quantizing for Minimum Distortion", IRE Trans. Inf. Theory IT-6, table of optimum uniform
    /// quantizers for a unit-variance Gaussian: N levels, midrise, step and mean squared error.
    /// </summary>
    [Theory]
    [InlineData(4, 0.9957, 0.1188)]
    [InlineData(8, 0.5860, 0.03744)]
    [InlineData(16, 0.3352, 0.01154)]
    public void MseOptimalStepMatchesMaxTableForUnitGaussian(int levels, double maxStep, double maxMse)
    {
        float[] x = UnitGaussian.Value;
        var grid = LevelGrid.Midrise(levels);
        float widest = TensorPrimitives.MaxMagnitude(x) / ((levels / 2) - 0.5f);

        float step = MseClipSearch.FindStep(x, grid, widest);
        double mse = grid.SquaredError(x, step) / x.Length;

        double stepError = Math.Abs(step - maxStep) / maxStep;
        double mseError = Math.Abs(mse - maxMse) / maxMse;
        output.WriteLine($"N={levels}: step {step:F4} (Max {maxStep}, {stepError:P2}), MSE {mse:F5} (Max {maxMse}, {mseError:P2})");
        Assert.InRange(stepError, 0, 0.02);
        Assert.InRange(mseError, 0, 0.02);
    }

    /// <summary>
    /// The 6.02 dB-per-bit rule (W. R. Bennett, 1948, "Spectra of quantized signals"; the usual ADC formula
    /// SQNR = 20 log10(2^b - 1) dB for a full-scale uniform signal on a grid whose end points are the data range).
    /// </summary>
    [Fact]
    public void AsymmetricMinMaxGainsSixDecibelsPerBitOnUniformValues()
    {
        float[] x = Samples.Uniform(1_000_000, seed: 1948, low: -1f, high: 1f);
        var sqnr = new Dictionary<int, double>();
        var approx = new float[x.Length];
        for (int bits = 6; bits <= 8; bits++)
        {
            var setting = new LayerSetting(bits, QuantizationScheme.Asymmetric, Granularity.PerTensor, ClipMethod.MinMax);
            WeightQuantizer.FakeQuantize(x, [x.Length], 0, setting, approx);
            sqnr[bits] = SignalNoise.SqnrDb(x, approx);
        }

        double gain67 = sqnr[7] - sqnr[6], gain78 = sqnr[8] - sqnr[7];
        double formula8 = 20 * Math.Log10(255);
        output.WriteLine($"SQNR 6/7/8 bits: {sqnr[6]:F3} {sqnr[7]:F3} {sqnr[8]:F3} dB; gains {gain67:F3}, {gain78:F3} dB/bit; 8-bit formula {formula8:F3} dB");
        Assert.InRange(gain67, 6.02 - 0.1, 6.02 + 0.1);
        Assert.InRange(gain78, 6.02 - 0.1, 6.02 + 0.1);
        Assert.InRange(sqnr[8], formula8 - 0.1, formula8 + 0.1);
    }

    /// <summary>
    /// The production symmetric MSE calibrator searches the engine's own grid: on the Gaussian sample at 4 bits
    /// its clip does at least as well as min-max and as clips 5% either side (it is the minimum of that grid).
    /// </summary>
    [Fact]
    public void MseOptimalCalibratorClipIsALocalMinimumOfTheStoredGridError()
    {
        float[] x = UnitGaussian.Value.AsSpan(0, 200_000).ToArray();
        var setting = new LayerSetting(4, QuantizationScheme.Symmetric, Granularity.PerTensor, ClipMethod.MseOptimal);
        var clip = ClipCalibrator.Calibrate(x, setting);

        double ErrorAt(float c)
        {
            float s = c / 7;
            var fake = new float[x.Length];
            QuantKernels.FakeQuantize(x, s, 0, -7, 7, fake);
            return SignalNoise.SquaredError(x, fake);
        }

        double best = ErrorAt(clip.High);
        Assert.True(best < ErrorAt(TensorPrimitives.MaxMagnitude(x)));
        Assert.True(best <= ErrorAt(clip.High * 1.05f));
        Assert.True(best <= ErrorAt(clip.High * 0.95f));
        Assert.Equal(-clip.High, clip.Low);
    }
}
