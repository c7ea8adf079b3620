namespace Bitbudget.Search.Evaluation;

/// <summary>
/// One named array from a dataset file. <see cref="Data"/> is in C order and native (little) endian:
/// float[] (Float32), Half[] (Float16), double[] (Float64), long[] (Int64), int[] (Int32), sbyte[] (Int8),
/// byte[] (UInt8) or bool[] (Bool).
/// </summary>
public sealed record NpyArray(string Name, ElementType ElementType, IReadOnlyList<long> Shape, Array Data)
{
    /// <summary>Length of the first (sample) axis; 1 for a 0-d array.</summary>
    public long SampleCount => Shape.Count == 0 ? 1 : Shape[0];

    /// <summary>Number of elements: the product of <see cref="Shape"/> (1 for a 0-d array).</summary>
    public long ElementCount
    {
        get
        {
            long n = 1;
            foreach (var d in Shape) n *= d;
            return n;
        }
    }

    /// <summary>Bytes of data: element count times the element size (a bool is one byte).</summary>
    public long ByteCount => ElementCount * ElementType switch
    {
        ElementType.Float64 or ElementType.Int64 => 8,
        ElementType.Float32 or ElementType.Int32 => 4,
        ElementType.Float16 => 2,
        _ => 1,
    };
}
