namespace Bitbudget.Search.Quantization;

/// <summary>
/// Bit widths as plain integers: 2..8 are integer grids, <see cref="Float16"/> stores the weight as
/// IEEE half precision and <see cref="Float32"/> keeps it unchanged.
/// </summary>
public static class BitWidths
{
    /// <summary>Store as 16-bit float.</summary>
    public const int Float16 = 16;

    /// <summary>Keep the FP32 weight.</summary>
    public const int Float32 = 32;

    /// <summary>Smallest integer bit width.</summary>
    public const int MinInteger = 2;

    /// <summary>Largest integer bit width.</summary>
    public const int MaxInteger = 8;

    /// <summary>True for 2..8.</summary>
    public static bool IsInteger(int bits) => bits is >= MinInteger and <= MaxInteger;

    /// <summary>True for every width the engine accepts.</summary>
    public static bool IsValid(int bits) => IsInteger(bits) || bits is Float16 or Float32;

    /// <summary>A width in words for messages: "FP32", "FP16", "4 bits".</summary>
    public static string Describe(int bits) => bits switch
    {
        Float32 => "FP32",
        Float16 => "FP16",
        _ => bits.ToString(System.Globalization.CultureInfo.InvariantCulture) + " bits",
    };
}
