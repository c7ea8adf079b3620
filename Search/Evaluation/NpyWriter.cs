using System.Globalization;
using System.Runtime.InteropServices;
using System.Text;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Writes one array as .npy: format version 1.0 (2.0 only if the header outgrows 64 KiB), little
/// endian, C order, header padded to a multiple of 64 bytes as NumPy itself pads it.
/// </summary>
public static class NpyWriter
{
    /// <summary>Writes <paramref name="array"/> at the current position of <paramref name="stream"/>.</summary>
    public static void Write(Stream stream, NpyArray array)
    {
        ArgumentNullException.ThrowIfNull(stream);
        ArgumentNullException.ThrowIfNull(array);
        var (descr, expectedType) = array.ElementType switch
        {
            ElementType.Float32 => ("<f4", typeof(float[])),
            ElementType.Float16 => ("<f2", typeof(Half[])),
            ElementType.Float64 => ("<f8", typeof(double[])),
            ElementType.Int64 => ("<i8", typeof(long[])),
            ElementType.Int32 => ("<i4", typeof(int[])),
            ElementType.Int8 => ("|i1", typeof(sbyte[])),
            ElementType.UInt8 => ("|u1", typeof(byte[])),
            ElementType.Bool => ("|b1", typeof(bool[])),
            _ => throw new ArgumentException($"Array '{array.Name}' has an element type .npy cannot carry: {array.ElementType}.", nameof(array)),
        };
        if (array.Data.GetType() != expectedType)
            throw new ArgumentException($"Array '{array.Name}' is {array.ElementType} but its data is {array.Data.GetType().Name}.", nameof(array));
        if (array.Data.LongLength != array.ElementCount)
            throw new ArgumentException(
                $"Array '{array.Name}' has shape {DatasetErrors.FormatShape(array.Shape)} ({array.ElementCount} elements) but {array.Data.LongLength} values.", nameof(array));

        string shape = array.Shape.Count switch
        {
            0 => "()",
            1 => $"({array.Shape[0].ToString(CultureInfo.InvariantCulture)},)",
            _ => "(" + string.Join(", ", array.Shape.Select(d => d.ToString(CultureInfo.InvariantCulture))) + ")",
        };
        string dict = $"{{'descr': '{descr}', 'fortran_order': False, 'shape': {shape}, }}";
        int preamble = 6 + 2 + 2;
        bool version2 = preamble + dict.Length + 1 > ushort.MaxValue;
        if (version2) preamble += 2;
        int padded = (preamble + dict.Length + 1 + 63) / 64 * 64;
        var header = dict + new string(' ', padded - preamble - dict.Length - 1) + "\n";

        Span<byte> start = stackalloc byte[12];
        NpyReader.Magic.CopyTo(start);
        start[6] = version2 ? (byte)2 : (byte)1;
        start[7] = 0;
        if (version2) System.Buffers.Binary.BinaryPrimitives.WriteUInt32LittleEndian(start[8..], (uint)header.Length);
        else System.Buffers.Binary.BinaryPrimitives.WriteUInt16LittleEndian(start[8..], (ushort)header.Length);
        stream.Write(start[..preamble]);
        stream.Write(Encoding.Latin1.GetBytes(header));
        if (!BitConverter.IsLittleEndian)
            throw new PlatformNotSupportedException("Writing .npy on a big-endian machine is not supported.");
        stream.Write(array.Data switch
        {
            float[] a => MemoryMarshal.AsBytes(a.AsSpan()),
            Half[] a => MemoryMarshal.AsBytes(a.AsSpan()),
            double[] a => MemoryMarshal.AsBytes(a.AsSpan()),
            long[] a => MemoryMarshal.AsBytes(a.AsSpan()),
            int[] a => MemoryMarshal.AsBytes(a.AsSpan()),
            byte[] a => a.AsSpan(), // also matches sbyte[]: the CLR treats the two as one array type
            bool[] a => MemoryMarshal.AsBytes(a.AsSpan()),
            _ => throw new InvalidOperationException("Unreachable: data type was checked above."),
        });
    }
}
