namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Cuts samples out of, and joins them back into, C-order arrays along any one axis: an input's sample
/// axis when a batch is fed, an output's sample axis when the batches' outputs are put together.
/// </summary>
/// <remarks>
/// Along axis k of shape [d0 .. dk .. dr], the array is <c>outer</c> = d0 x .. x d(k-1) blocks, each
/// holding dk samples of <c>inner</c> = d(k+1) x .. x dr values; a sample's values are not contiguous
/// unless k = 0, so every copy walks the outer blocks.
/// </remarks>
internal static class SampleSlicer
{
    /// <summary>
    /// Samples [start, start + count) along <paramref name="axis"/> as a new array of <paramref name="rows"/>
    /// samples; rows beyond <paramref name="count"/> repeat the last real sample (fixed-batch padding).
    /// </summary>
    public static Array Slice(Array data, IReadOnlyList<long> shape, int axis, int start, int count, int rows, out long[] sliceShape)
    {
        var (outer, size, inner) = Split(shape, axis);
        sliceShape = shape.ToArray();
        sliceShape[axis] = rows;
        var slice = Array.CreateInstance(data.GetType().GetElementType()!, outer * rows * inner);
        for (long o = 0; o < outer; o++)
        {
            long from = (o * size + start) * inner, to = o * rows * inner;
            Array.Copy(data, from, slice, to, count * inner);
            for (long r = count; r < rows; r++)
            {
                Array.Copy(data, (o * size + start + count - 1) * inner, slice, to + r * inner, inner);
            }
        }

        return slice;
    }

    /// <summary>
    /// Joins per-run parts along <paramref name="axis"/>, keeping the first <c>counts[i]</c> samples of part i
    /// (dropping the padding of a fixed batch). Every part has the same shape off the axis.
    /// </summary>
    public static Array Concatenate(IReadOnlyList<Array> parts, IReadOnlyList<long[]> shapes, int axis, IReadOnlyList<int> counts, out long[] shape)
    {
        var (outer, _, inner) = Split(shapes[0], axis);
        long total = counts.Sum(c => (long)c);
        shape = shapes[0].ToArray();
        shape[axis] = total;
        var result = Array.CreateInstance(parts[0].GetType().GetElementType()!, outer * total * inner);
        long offset = 0;
        for (int p = 0; p < parts.Count; p++)
        {
            long size = shapes[p][axis], keep = counts[p];
            for (long o = 0; o < outer; o++)
            {
                Array.Copy(parts[p], o * size * inner, result, (o * total + offset) * inner, keep * inner);
            }

            offset += keep;
        }

        return result;
    }

    /// <summary>Values before, along and after <paramref name="axis"/>.</summary>
    public static (long Outer, long Size, long Inner) Split(IReadOnlyList<long> shape, int axis)
    {
        long outer = 1, inner = 1;
        for (int a = 0; a < axis; a++) outer *= shape[a];
        for (int a = axis + 1; a < shape.Count; a++) inner *= shape[a];
        return (outer, shape[axis], inner);
    }
}
