using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// Storage arithmetic of weights, in bytes unless named otherwise. <see cref="LayerBytes"/> is the ideal packed
/// count (b bits per weight plus scales and zero points); what a search plans with is <see cref="ModelSizer"/>,
/// which counts what the export writes (container widths, scales, zero points, nodes) or, under
/// <see cref="StorageRule.Packed"/>, this packed payload in place of the container.
/// </summary>
public static class CostModel
{
    /// <summary>Bytes of one scale: scales are stored as FP32.</summary>
    public const int ScaleBytes = 4;

    /// <summary>
    /// Bytes of one zero point at an integer width of 2..8 bits: the zero point is stored in the
    /// weight's own integer type, and the smallest such element is one byte.
    /// </summary>
    public const int ZeroPointBytes = 1;

    /// <summary>
    /// Bytes of a weight of <paramref name="parameters"/> values at <paramref name="bits"/>:
    /// ceil(parameters x bits / 8) plus one FP32 scale (and, when asymmetric, one zero point) per
    /// channel for per-channel or once for per-tensor; 2 x parameters for FP16, 4 x parameters for FP32.
    /// </summary>
    /// <param name="channels">Output channels; used only for per-channel integer widths.</param>
    public static long LayerBytes(long parameters, long channels, int bits, QuantizationScheme scheme, Granularity granularity)
    {
        if (parameters < 1)
        {
            ThrowInvalid("invalid-parameter-count", $"A layer must have at least one weight parameter; got {parameters}.");
        }

        if (!BitWidths.IsValid(bits))
        {
            ThrowInvalid("invalid-bit-width", $"Bit width {bits} is not supported; use 2..8, 16 (FP16) or 32 (keep FP32).");
        }

        if (bits == BitWidths.Float32)
        {
            return checked(parameters * 4);
        }

        if (bits == BitWidths.Float16)
        {
            return checked(parameters * 2);
        }

        long scales = 1;
        if (granularity == Granularity.PerChannel)
        {
            if (channels < 1 || channels > parameters)
            {
                ThrowInvalid("invalid-channel-count", $"A per-channel weight of {parameters} parameters needs 1..{parameters} channels; got {channels}.");
            }

            scales = channels;
        }

        long payload = PayloadBytes(parameters, bits);
        long overhead = scales * ScaleBytes;
        if (scheme == QuantizationScheme.Asymmetric)
        {
            overhead += scales * ZeroPointBytes;
        }

        return checked(payload + overhead);
    }

    /// <summary>Bytes of <paramref name="parameters"/> values of <paramref name="bits"/> bits each, packed: ceil(parameters x bits / 8).</summary>
    public static long PayloadBytes(long parameters, int bits) => checked((parameters * bits) + 7) / 8;

    /// <summary>Average stored bits per quantizable weight, scales and zero points included: 8 x bytes / parameters.</summary>
    public static double AverageBits(long quantizedBytes, long quantizedParameters)
    {
        if (quantizedParameters < 1)
        {
            ThrowInvalid("no-quantizable-weights", "Average bits need at least one quantizable weight parameter; the model has none.");
        }

        return 8.0 * quantizedBytes / quantizedParameters;
    }

    /// <summary>
    /// The largest byte count of the quantizable layers that keeps the average at or below
    /// <paramref name="averageBits"/> bits per weight (rounded down to whole bytes).
    /// </summary>
    public static long LayerBytesForAverageBits(double averageBits, long quantizedParameters)
    {
        if (!(averageBits > 0) || double.IsInfinity(averageBits))
        {
            ThrowInvalid("invalid-size-budget", $"An average-bits budget must be a positive number of bits; got {averageBits}.");
        }

        if (quantizedParameters < 1)
        {
            ThrowInvalid("no-quantizable-weights", "Average bits need at least one quantizable weight parameter; the model has none.");
        }

        return (long)Math.Floor(averageBits * quantizedParameters / 8.0);
    }

    private static void ThrowInvalid(string code, string message) => throw new EngineException(code, message);
}
