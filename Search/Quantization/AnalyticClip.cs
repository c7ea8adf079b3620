namespace Bitbudget.Search.Quantization;

/// <summary>
/// Analytic clipping of R. Banner, Y. Nahshan, D. Soudry (2019), "Post training 4-bit quantization of
/// convolutional networks for rapid-deployment": the clip alpha minimises their approximate mean squared
/// error, clipping error plus alpha^2 / (3 * 4^M) quantization error for M bits. For Laplace(0, b) the clipping
/// error is 2 b^2 e^(-alpha/b); for N(0, sigma^2) it is (alpha^2 + sigma^2)(1 - erf(alpha / (sqrt 2 sigma)))
/// - sqrt(2/pi) alpha sigma e^(-alpha^2 / (2 sigma^2)). Both scale with b (sigma), so alpha = c(M) * b and the
/// factors c(M) are found once, here, by minimising the error for b = sigma = 1.
/// </summary>
internal static class AnalyticClip
{
    private static readonly double[] LaplaceFactors = Table(LaplaceError);
    private static readonly double[] GaussianFactors = Table(GaussianError);

    /// <summary>c(M) with alpha = c(M) * b for Laplace-shaped values with scale b = mean |w - mean|.</summary>
    public static double LaplaceFactor(int bits) => LaplaceFactors[Index(bits)];

    /// <summary>c(M) with alpha = c(M) * sigma for Gaussian-shaped values.</summary>
    public static double GaussianFactor(int bits) => GaussianFactors[Index(bits)];

    /// <summary>The paper's approximate error for Laplace(0, 1) clipped at alpha with M bits.</summary>
    public static double LaplaceError(double alpha, int bits) =>
        (2 * Math.Exp(-alpha)) + QuantizationNoise(alpha, bits);

    /// <summary>The paper's approximate error for N(0, 1) clipped at alpha with M bits.</summary>
    public static double GaussianError(double alpha, int bits) =>
        ((alpha * alpha) + 1) * SpecialFunctions.Erfc(alpha / Math.Sqrt(2))
        - (Math.Sqrt(2 / Math.PI) * alpha * Math.Exp(-alpha * alpha / 2))
        + QuantizationNoise(alpha, bits);

    private static double QuantizationNoise(double alpha, int bits) => alpha * alpha / (3 * Math.Pow(4, bits));

    private static int Index(int bits)
    {
        if (!BitWidths.IsInteger(bits))
        {
            throw new ArgumentOutOfRangeException(nameof(bits), bits, "Analytic clipping exists for 2 to 8 bits only.");
        }

        return bits - BitWidths.MinInteger;
    }

    private static double[] Table(Func<double, int, double> error)
    {
        var table = new double[BitWidths.MaxInteger - BitWidths.MinInteger + 1];
        for (int bits = BitWidths.MinInteger; bits <= BitWidths.MaxInteger; bits++)
        {
            table[bits - BitWidths.MinInteger] = Minimise(alpha => error(alpha, bits), 0.01, 40);
        }

        return table;
    }

    /// <summary>Golden-section search; both error curves are unimodal in alpha on (0, 40].</summary>
    private static double Minimise(Func<double, double> f, double a, double b)
    {
        double r = (Math.Sqrt(5) - 1) / 2;
        double c = b - (r * (b - a)), d = a + (r * (b - a));
        double fc = f(c), fd = f(d);
        while (b - a > 1e-10)
        {
            if (fc <= fd)
            {
                (b, d, fd) = (d, c, fc);
                c = b - (r * (b - a));
                fc = f(c);
            }
            else
            {
                (a, c, fc) = (c, d, fd);
                d = a + (r * (b - a));
                fd = f(d);
            }
        }

        return (a + b) / 2;
    }
}
