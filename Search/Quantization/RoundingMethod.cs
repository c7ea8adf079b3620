namespace Bitbudget.Search.Quantization;

/// <summary>How a weight's values are mapped to the integers of its grid (the grid itself is the same).</summary>
public enum RoundingMethod
{
    /// <summary>Each value to its nearest level, independently (round half to even, as QuantizeLinear).</summary>
    Nearest,

    /// <summary>
    /// Column by column with the rounding error pushed onto the columns not yet rounded, weighted by the
    /// inverse of the layer's input second-moment matrix (GPTQ, Frantar et al., 2022). Needs the layer's
    /// calibration inputs; layers without them stay at nearest.
    /// </summary>
    Compensated,
}
