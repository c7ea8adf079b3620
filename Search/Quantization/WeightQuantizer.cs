using System.Buffers;

namespace Bitbudget.Search.Quantization;

/// <summary>
/// Quantizes, dequantizes and fake-quantizes one weight tensor per a <see cref="LayerSetting"/>, per-tensor or
/// per channel along any axis. Integer results match ONNX Runtime's QuantizeLinear bit for bit.
/// </summary>
public static class WeightQuantizer
{
    /// <summary>
    /// Quantizes a weight of the given shape (C order) to integers. <paramref name="channelAxis"/> is used for
    /// per-channel settings only (negative values count from the end). Bit widths 2..8 only.
    /// </summary>
    public static QuantizedWeight Quantize(ReadOnlySpan<float> weights, IReadOnlyList<long> shape, int channelAxis, LayerSetting setting)
    {
        ArgumentNullException.ThrowIfNull(setting);
        if (!BitWidths.IsInteger(setting.Bits))
        {
            throw new EngineException("bit-width-not-integer", $"Only 2 to 8 bits have an integer grid (got {setting.Bits}); 16-bit float and FP32 weights are stored as floats.");
        }

        int axis = Validate(weights.Length, shape, channelAxis, setting);
        var (qmin, qmax) = QuantGrid.For(setting.Bits, setting.Scheme);
        var levels = new int[weights.Length];
        if (axis < 0)
        {
            var (scale, zeroPoint) = Parameters(weights, setting);
            QuantKernels.Quantize(weights, scale, zeroPoint, qmin, qmax, levels);
            return new QuantizedWeight(setting.Bits, setting.Scheme, -1, [scale], [zeroPoint], levels);
        }

        var layout = ChannelLayout.For(shape, axis);
        var scales = new float[layout.Channels];
        var zeroPoints = new int[layout.Channels];
        int length = layout.ChannelLength;
        float[]? gathered = layout.ChannelsContiguous ? null : ArrayPool<float>.Shared.Rent(length);
        int[]? quantized = layout.ChannelsContiguous ? null : ArrayPool<int>.Shared.Rent(length);
        try
        {
            for (int c = 0; c < layout.Channels; c++)
            {
                if (layout.ChannelsContiguous)
                {
                    var channel = weights.Slice(c * length, length);
                    (scales[c], zeroPoints[c]) = Parameters(channel, setting);
                    QuantKernels.Quantize(channel, scales[c], zeroPoints[c], qmin, qmax, levels.AsSpan(c * length, length));
                }
                else
                {
                    var channel = gathered.AsSpan(0, length);
                    layout.Gather(c, weights, channel);
                    (scales[c], zeroPoints[c]) = Parameters(channel, setting);
                    QuantKernels.Quantize(channel, scales[c], zeroPoints[c], qmin, qmax, quantized.AsSpan(0, length));
                    layout.Scatter<int>(c, quantized.AsSpan(0, length), levels);
                }
            }
        }
        finally
        {
            Return(gathered);
            Return(quantized);
        }

        return new QuantizedWeight(setting.Bits, setting.Scheme, axis, scales, zeroPoints, levels);
    }

    /// <summary>
    /// Writes the weight as the model will see it after storage: s (q - z) for 2..8 bits, the nearest IEEE
    /// half for 16 bits, an exact copy for 32 bits. <paramref name="destination"/> may be the weights' own memory.
    /// </summary>
    public static void FakeQuantize(ReadOnlySpan<float> weights, IReadOnlyList<long> shape, int channelAxis, LayerSetting setting, Span<float> destination)
    {
        ArgumentNullException.ThrowIfNull(setting);
        if (destination.Length != weights.Length)
        {
            throw new ArgumentException("The destination must have as many elements as the weight.", nameof(destination));
        }

        int axis = Validate(weights.Length, shape, channelAxis, setting);
        if (setting.Bits == BitWidths.Float32)
        {
            weights.CopyTo(destination);
            return;
        }

        if (setting.Bits == BitWidths.Float16)
        {
            QuantKernels.RoundTripHalf(weights, destination);
            return;
        }

        var (qmin, qmax) = QuantGrid.For(setting.Bits, setting.Scheme);
        if (axis < 0)
        {
            var (scale, zeroPoint) = Parameters(weights, setting);
            QuantKernels.FakeQuantize(weights, scale, zeroPoint, qmin, qmax, destination);
            return;
        }

        var layout = ChannelLayout.For(shape, axis);
        int length = layout.ChannelLength;
        if (layout.ChannelsContiguous)
        {
            for (int c = 0; c < layout.Channels; c++)
            {
                var channel = weights.Slice(c * length, length);
                var (scale, zeroPoint) = Parameters(channel, setting);
                QuantKernels.FakeQuantize(channel, scale, zeroPoint, qmin, qmax, destination.Slice(c * length, length));
            }

            return;
        }

        float[] rented = ArrayPool<float>.Shared.Rent(2 * length);
        try
        {
            var channel = rented.AsSpan(0, length);
            var result = rented.AsSpan(length, length);
            for (int c = 0; c < layout.Channels; c++)
            {
                layout.Gather(c, weights, channel);
                var (scale, zeroPoint) = Parameters(channel, setting);
                QuantKernels.FakeQuantize(channel, scale, zeroPoint, qmin, qmax, result);
                layout.Scatter<float>(c, result, destination);
            }
        }
        finally
        {
            ArrayPool<float>.Shared.Return(rented);
        }
    }

    /// <summary>Writes s (q - z) for every level of a quantized weight of the given shape.</summary>
    public static void Dequantize(QuantizedWeight quantized, IReadOnlyList<long> shape, Span<float> destination)
    {
        ArgumentNullException.ThrowIfNull(quantized);
        ArgumentNullException.ThrowIfNull(shape);
        if (destination.Length != quantized.Levels.Length)
        {
            throw new ArgumentException("The destination must have as many elements as the quantized weight.", nameof(destination));
        }

        long count = ElementCount(shape);
        int channels = quantized.Axis < 0 ? 1
            : quantized.Axis < shape.Count ? checked((int)shape[quantized.Axis]) : -1;
        if (count != quantized.Levels.Length || channels < 0
            || quantized.Scales.Length != channels || quantized.ZeroPoints.Length != channels)
        {
            throw new EngineException("quantized-weight-mismatch", "The quantized weight's levels, scales or zero points do not fit the weight's shape and axis.");
        }

        if (quantized.Axis < 0)
        {
            QuantKernels.Dequantize(quantized.Levels, quantized.Scales[0], quantized.ZeroPoints[0], destination);
            return;
        }

        var layout = ChannelLayout.For(shape, quantized.Axis);
        int length = layout.ChannelLength;
        if (layout.ChannelsContiguous)
        {
            for (int c = 0; c < layout.Channels; c++)
            {
                QuantKernels.Dequantize(quantized.Levels.AsSpan(c * length, length), quantized.Scales[c], quantized.ZeroPoints[c], destination.Slice(c * length, length));
            }

            return;
        }

        int[] levels = ArrayPool<int>.Shared.Rent(length);
        float[] values = ArrayPool<float>.Shared.Rent(length);
        try
        {
            for (int c = 0; c < layout.Channels; c++)
            {
                layout.Gather<int>(c, quantized.Levels, levels.AsSpan(0, length));
                QuantKernels.Dequantize(levels.AsSpan(0, length), quantized.Scales[c], quantized.ZeroPoints[c], values.AsSpan(0, length));
                layout.Scatter<float>(c, values.AsSpan(0, length), destination);
            }
        }
        finally
        {
            ArrayPool<int>.Shared.Return(levels);
            ArrayPool<float>.Shared.Return(values);
        }
    }

    private static (float Scale, int ZeroPoint) Parameters(ReadOnlySpan<float> values, LayerSetting setting) =>
        AffineParameters.From(ClipCalibrator.Calibrate(values, setting), setting.Bits, setting.Scheme);

    /// <summary>Checks the setting and shape; returns the normalised channel axis, or -1 for per-tensor.</summary>
    private static int Validate(int length, IReadOnlyList<long> shape, int channelAxis, LayerSetting setting)
    {
        ArgumentNullException.ThrowIfNull(shape);
        if (!BitWidths.IsValid(setting.Bits))
        {
            throw new EngineException("bit-width-unsupported", $"Bit width {setting.Bits} is not supported; use 2 to 8, 16 (float) or 32 (keep FP32).");
        }

        if (setting.Clip == ClipMethod.Percentile && BitWidths.IsInteger(setting.Bits))
        {
            ClipCalibrator.CheckPercentile(setting.Percentile);
        }

        long count = ElementCount(shape);
        if (count != length)
        {
            throw new EngineException("weight-shape-mismatch", $"The weight has {length} values but its shape [{string.Join(", ", shape)}] holds {count}.");
        }

        if (setting.Granularity == Granularity.PerTensor || !BitWidths.IsInteger(setting.Bits))
        {
            return -1;
        }

        int axis = channelAxis < 0 ? channelAxis + shape.Count : channelAxis;
        if (axis < 0 || axis >= shape.Count)
        {
            throw new EngineException("channel-axis-out-of-range", $"Channel axis {channelAxis} does not exist in a weight of rank {shape.Count}; use per-tensor granularity or an axis in 0..{shape.Count - 1}.");
        }

        return axis;
    }

    private static long ElementCount(IReadOnlyList<long> shape)
    {
        long count = 1;
        foreach (long dim in shape)
        {
            if (dim < 0)
            {
                throw new EngineException("weight-shape-invalid", $"The weight shape [{string.Join(", ", shape)}] has a negative dimension.");
            }

            count = checked(count * dim);
        }

        return count;
    }

    private static void Return<T>(T[]? rented)
    {
        if (rented is not null)
        {
            ArrayPool<T>.Shared.Return(rented);
        }
    }
}
