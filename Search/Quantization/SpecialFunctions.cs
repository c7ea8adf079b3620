namespace Bitbudget.Search.Quantization;

/// <summary>Special functions .NET does not ship.</summary>
internal static class SpecialFunctions
{
    // Coefficients of the polynomial in t, constant term first.
    private static readonly double[] ErfcCoefficients =
    [
        -1.26551223, 1.00002368, 0.37409196, 0.09678418, -0.18628806,
        0.27886807, -1.13520398, 1.48851587, -0.82215223, 0.17087277,
    ];

    /// <summary>
    /// Complementary error function by the Chebyshev-fitted formula "erfcc" of W. H. Press et al., Numerical
    /// Recipes in C, 2nd ed. (1992), section 6.2; fractional error below 1.2e-7 everywhere.
    /// </summary>
    public static double Erfc(double x)
    {
        double z = Math.Abs(x);
        double t = 1 / (1 + (0.5 * z));
        double poly = 0;
        for (int i = ErfcCoefficients.Length - 1; i >= 0; i--)
        {
            poly = (poly * t) + ErfcCoefficients[i];
        }

        double ans = t * Math.Exp((-z * z) + poly);
        return x >= 0 ? ans : 2 - ans;
    }
}
