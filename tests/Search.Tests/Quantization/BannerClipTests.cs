using Bitbudget.Search.Quantization;
using Xunit.Abstractions;

namespace Bitbudget.Search.Tests.Quantization;

/// <summary>
/// R. Banner, Y. Nahshan, D. Soudry (2019), "Post training 4-bit quantization of convolutional networks for
/// rapid-deployment" (NeurIPS): optimal clipping values alpha* = 2.83 b, 3.89 b, 5.03 b for Laplace(0, b) and
/// 1.71 sigma, 2.15 sigma, 2.55 sigma for N(0, sigma^2) at M = 2, 3, 4 bits, from minimising their approximate
/// error. (We compare with the paper's constants only, never with an empirical MSE optimum, which the
/// approximation does not claim to equal.)
/// </summary>
public class BannerClipTests(ITestOutputHelper output)
{
    [Theory]
    [InlineData(2, 2.83)]
    [InlineData(3, 3.89)]
    [InlineData(4, 5.03)]
    public void LaplaceFactorMatchesThePaper(int bits, double published)
    {
        double factor = AnalyticClip.LaplaceFactor(bits);
        output.WriteLine($"Laplace c({bits}) = {factor:F4} (paper {published})");
        Assert.InRange(factor, published - 0.01, published + 0.01);
    }

    [Theory]
    [InlineData(2, 1.71)]
    [InlineData(3, 2.15)]
    [InlineData(4, 2.55)]
    public void GaussianFactorMatchesThePaper(int bits, double published)
    {
        double factor = AnalyticClip.GaussianFactor(bits);
        output.WriteLine($"Gaussian c({bits}) = {factor:F4} (paper {published})");
        Assert.InRange(factor, published - 0.01, published + 0.01);
    }

    [Fact]
    public void FactorsGrowWithBitsAndMinimiseThePaperError()
    {
        for (int bits = 2; bits <= 8; bits++)
        {
            double laplace = AnalyticClip.LaplaceFactor(bits), gaussian = AnalyticClip.GaussianFactor(bits);
            Assert.True(AnalyticClip.LaplaceError(laplace, bits) < AnalyticClip.LaplaceError(laplace * 0.99, bits));
            Assert.True(AnalyticClip.LaplaceError(laplace, bits) < AnalyticClip.LaplaceError(laplace * 1.01, bits));
            Assert.True(AnalyticClip.GaussianError(gaussian, bits) < AnalyticClip.GaussianError(gaussian * 0.99, bits));
            Assert.True(AnalyticClip.GaussianError(gaussian, bits) < AnalyticClip.GaussianError(gaussian * 1.01, bits));
            if (bits > 2)
            {
                Assert.True(laplace > AnalyticClip.LaplaceFactor(bits - 1));
                Assert.True(gaussian > AnalyticClip.GaussianFactor(bits - 1));
            }
        }
    }

    /// <summary>
    /// Values of erf from M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), table 7.1:
    /// erf(0.5) = 0.5204998778, erf(1) = 0.8427007929, erf(2) = 0.9953222650 (quoted from memory).
    /// </summary>
    [Theory]
    [InlineData(0.0, 1.0)]
    [InlineData(0.5, 1 - 0.5204998778)]
    [InlineData(1.0, 1 - 0.8427007929)]
    [InlineData(2.0, 1 - 0.9953222650)]
    [InlineData(-1.0, 1 + 0.8427007929)]
    public void ErfcMatchesTabulatedValues(double x, double expected)
    {
        Assert.InRange(SpecialFunctions.Erfc(x), expected * (1 - 2e-7), expected * (1 + 2e-7));
    }

    [Theory]
    [InlineData(2)]
    [InlineData(4)]
    [InlineData(8)]
    public void LaplaceCalibratorClipsALaplaceSampleAtFactorTimesScale(int bits)
    {
        const double b = 0.02;
        float[] x = Samples.Laplace(400_000, seed: 2019 + bits, b: b);
        var setting = new LayerSetting(bits, QuantizationScheme.Symmetric, Granularity.PerTensor, ClipMethod.AnalyticLaplace);
        var clip = ClipCalibrator.Calibrate(x, setting);
        double expected = AnalyticClip.LaplaceFactor(bits) * b;
        output.WriteLine($"{bits} bits: clip {clip.High:F5}, c(M) b = {expected:F5}");
        Assert.InRange(clip.High, expected * 0.985, expected * 1.015);
    }

    [Fact]
    public void GaussianCalibratorClipsAGaussianSampleAtFactorTimesSigma()
    {
        const double sigma = 0.03;
        float[] x = Samples.Gaussian(400_000, seed: 2020, sigma: sigma);
        var setting = new LayerSetting(3, QuantizationScheme.Asymmetric, Granularity.PerTensor, ClipMethod.AnalyticGaussian);
        var clip = ClipCalibrator.Calibrate(x, setting);
        double expected = AnalyticClip.GaussianFactor(3) * sigma;
        Assert.InRange(clip.High, expected * 0.985, expected * 1.015);
        Assert.InRange(-clip.Low, expected * 0.985, expected * 1.015);
    }
}
