namespace Bitbudget.Search.Quantization;

/// <summary>
/// A weight seen as [Outer, Channels, Inner] around its channel axis: channel c is Outer blocks of Inner
/// contiguous values, one block every Channels * Inner elements.
/// </summary>
internal readonly record struct ChannelLayout(int Outer, int Channels, int Inner)
{
    public int ChannelLength => Outer * Inner;

    /// <summary>True when a channel is one contiguous run (axis 0), so no gathering is needed.</summary>
    public bool ChannelsContiguous => Outer == 1;

    public static ChannelLayout For(IReadOnlyList<long> shape, int axis)
    {
        long outer = 1, inner = 1;
        for (int d = 0; d < axis; d++)
        {
            outer *= shape[d];
        }

        for (int d = axis + 1; d < shape.Count; d++)
        {
            inner *= shape[d];
        }

        return new ChannelLayout(checked((int)outer), checked((int)shape[axis]), checked((int)inner));
    }

    public int BlockStart(int outer, int channel) => ((outer * Channels) + channel) * Inner;

    public void Gather<T>(int channel, ReadOnlySpan<T> source, Span<T> destination)
    {
        if (Inner == 1)
        {
            // A last-axis channel (MatMul [K, N]) is a stride-N column: copy element by element.
            for (int o = 0, at = channel; o < Outer; o++, at += Channels)
            {
                destination[o] = source[at];
            }

            return;
        }

        for (int o = 0; o < Outer; o++)
        {
            source.Slice(BlockStart(o, channel), Inner).CopyTo(destination.Slice(o * Inner, Inner));
        }
    }

    public void Scatter<T>(int channel, ReadOnlySpan<T> source, Span<T> destination)
    {
        if (Inner == 1)
        {
            for (int o = 0, at = channel; o < Outer; o++, at += Channels)
            {
                destination[at] = source[o];
            }

            return;
        }

        for (int o = 0; o < Outer; o++)
        {
            source.Slice(o * Inner, Inner).CopyTo(destination.Slice(BlockStart(o, channel), Inner));
        }
    }
}
