namespace Bitbudget.Search.Quantization;

/// <summary>The integer range a bit width and scheme store weights in.</summary>
public static class QuantGrid
{
    /// <summary>
    /// Symmetric: the narrow signed range [-(2^(b-1)-1), 2^(b-1)-1] so that the grid is mirror-image around
    /// zero; asymmetric: the unsigned range [0, 2^b-1]. Throws for bit widths outside 2..8.
    /// </summary>
    public static (int Min, int Max) For(int bits, QuantizationScheme scheme)
    {
        if (!BitWidths.IsInteger(bits))
        {
            ThrowBits(bits);
        }

        return scheme switch
        {
            QuantizationScheme.Symmetric => (-((1 << (bits - 1)) - 1), (1 << (bits - 1)) - 1),
            QuantizationScheme.Asymmetric => (0, (1 << bits) - 1),
            _ => throw new ArgumentOutOfRangeException(nameof(scheme), scheme, "Unknown quantization scheme."),
        };
    }

    private static void ThrowBits(int bits) =>
        throw new ArgumentOutOfRangeException(nameof(bits), bits, "Integer grids exist for 2 to 8 bits only.");
}
