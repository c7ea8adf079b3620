namespace Bitbudget.Search.Quantization;

/// <summary>How real values map onto the integer grid.</summary>
public enum QuantizationScheme
{
    /// <summary>Zero point 0 and the narrow signed range (-127..127 at 8 bits).</summary>
    Symmetric,

    /// <summary>Affine: unsigned range 0..2^b-1 with a zero point that makes real 0 exactly representable.</summary>
    Asymmetric,
}
