using System.Buffers.Binary;
using System.Runtime.CompilerServices;
using System.Runtime.InteropServices;
using System.Text;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Reads one array in NumPy's .npy format (versions 1.0, 2.0 and 3.0): float32, float16, float64, int64,
/// int32, int8, uint8 and bool, little- or big-endian, C or Fortran order. The result is always C order
/// and native endian. Anything else is refused with <c>dataset-invalid</c>; an array over the limits
/// with <c>dataset-too-large</c>, before its data is allocated.
/// </summary>
public static class NpyReader
{
    /// <summary>The six bytes every .npy file starts with (0x93 is a raw byte, not a UTF-8 character).</summary>
    internal static ReadOnlySpan<byte> Magic => [0x93, (byte)'N', (byte)'U', (byte)'M', (byte)'P', (byte)'Y'];

    /// <summary>Longest header accepted; NumPy's own headers are a few hundred bytes.</summary>
    private const int MaxHeaderBytes = 64 * 1024;

    /// <summary>Size of the first buffer when the stream cannot tell how much data it still holds.</summary>
    private const int InitialChunkBytes = 1 << 20;

    /// <summary>
    /// Reads one .npy array from the current position of <paramref name="stream"/> and leaves the stream
    /// just after its data (NumPy allows several arrays back to back in one file).
    /// </summary>
    /// <param name="name">Name given to the array; also used in error messages.</param>
    /// <param name="limits">Caps on its data size; both MaxArrayBytes and MaxTotalBytes apply.</param>
    public static NpyArray Read(Stream stream, string name, DatasetLimits? limits = null)
    {
        var (header, count) = ReadHeader(stream, name, limits);
        Array data = header.ElementType switch
        {
            ElementType.Float32 => ReadElements<float>(stream, count, header, name),
            ElementType.Float16 => ReadElements<Half>(stream, count, header, name),
            ElementType.Float64 => ReadElements<double>(stream, count, header, name),
            ElementType.Int64 => ReadElements<long>(stream, count, header, name),
            ElementType.Int32 => ReadElements<int>(stream, count, header, name),
            ElementType.Int8 => ReadElements<sbyte>(stream, count, header, name),
            ElementType.UInt8 => ReadElements<byte>(stream, count, header, name),
            ElementType.Bool => ReadBools(stream, count, header, name),
            _ => throw new InvalidOperationException("NpyHeader returned an unsupported type."),
        };
        return new NpyArray(name, header.ElementType, header.Shape, data);
    }

    /// <summary>
    /// Reads one .npy array's header and then streams past its data through a small buffer, checking the
    /// data is all there without holding it: what an upload needs to describe an array in bounded memory.
    /// </summary>
    public static NpyArrayInfo Skim(Stream stream, string name, DatasetLimits? limits = null)
    {
        var (header, count) = ReadHeader(stream, name, limits);
        long bytes = count * header.ItemSize;
        var scratch = new byte[(int)Math.Min(Math.Max(bytes, 1), 1 << 16)];
        long left = bytes;
        while (left > 0)
        {
            int n = ReadAtMost(stream, scratch.AsSpan(0, (int)Math.Min(left, scratch.Length)));
            if (n == 0)
                throw TruncatedData(name, header, bytes, bytes - left);
            left -= n;
        }
        return new NpyArrayInfo(name, header.ElementType, header.Shape, bytes);
    }

    /// <summary>Reads only the header: enough to know an array's type, shape and decoded size before inflating its data.</summary>
    public static NpyArrayInfo ReadInfo(Stream stream, string name, DatasetLimits? limits = null)
    {
        var (header, count) = ReadHeader(stream, name, limits);
        return new NpyArrayInfo(name, header.ElementType, header.Shape, count * header.ItemSize);
    }

    private static (NpyHeader Header, long Count) ReadHeader(Stream stream, string name, DatasetLimits? limits)
    {
        ArgumentNullException.ThrowIfNull(stream);
        ArgumentNullException.ThrowIfNull(name);
        limits ??= DatasetLimits.Default;

        Span<byte> preamble = stackalloc byte[8];
        int got = ReadAtMost(stream, preamble);
        if (got < 6 || !preamble[..6].SequenceEqual(Magic))
            throw DatasetErrors.Invalid($"Array '{name}' is not a .npy file: it does not start with the NumPy magic bytes \\x93NUMPY.");
        if (got < 8)
            throw Truncated(name, "in its preamble");
        byte major = preamble[6], minor = preamble[7];
        if (major is < 1 or > 3 || minor != 0)
            throw DatasetErrors.Invalid($"Array '{name}' uses .npy format version {major}.{minor}; versions 1.0, 2.0 and 3.0 are read.");

        Span<byte> lengthBytes = stackalloc byte[4];
        var lengthField = major == 1 ? lengthBytes[..2] : lengthBytes;
        if (ReadAtMost(stream, lengthField) < lengthField.Length)
            throw Truncated(name, "in its header length");
        long headerLength = major == 1 ? BinaryPrimitives.ReadUInt16LittleEndian(lengthField) : BinaryPrimitives.ReadUInt32LittleEndian(lengthField);
        if (headerLength > MaxHeaderBytes)
            throw DatasetErrors.Invalid($"Array '{name}' claims a {headerLength}-byte header; a .npy header is at most {MaxHeaderBytes} bytes here.");

        var headerBytes = new byte[headerLength];
        if (ReadAtMost(stream, headerBytes) < headerBytes.Length)
            throw Truncated(name, "in its header");
        // Versions 1.0 and 2.0 store the header in Latin-1; 3.0 switched to UTF-8 for unicode field names.
        string headerText;
        try
        {
            headerText = major == 3
                ? new UTF8Encoding(false, throwOnInvalidBytes: true).GetString(headerBytes)
                : Encoding.Latin1.GetString(headerBytes);
        }
        catch (DecoderFallbackException e)
        {
            throw DatasetErrors.Invalid($"Array '{name}' has a version 3.0 header that is not valid UTF-8.", e);
        }
        var header = NpyHeader.Parse(headerText, name);

        long count = CountElements(header, name);
        long bytes = count * header.ItemSize;
        long cap = Math.Min(limits.MaxArrayBytes, limits.MaxTotalBytes);
        if (bytes > cap)
            throw DatasetErrors.TooLarge(
                $"Array '{name}' holds {DatasetErrors.FormatBytes(bytes)} ({DatasetErrors.TypeName(header.ElementType)}, shape {DatasetErrors.FormatShape(header.Shape)}); " +
                $"the limit is {DatasetErrors.FormatBytes(cap)}. Send fewer samples.");
        return (header, count);
    }

    private static long CountElements(NpyHeader header, string name)
    {
        long count = 1;
        foreach (var d in header.Shape)
        {
            if (d != 0 && count > Array.MaxLength / d)
                throw DatasetErrors.TooLarge($"Array '{name}' has shape {DatasetErrors.FormatShape(header.Shape)}, more elements than one array can hold.");
            count *= d;
        }
        return count;
    }

    private static T[] ReadElements<T>(Stream stream, long count, NpyHeader header, string name)
        where T : unmanaged
    {
        var data = ReadRaw<T>(stream, count, header, name);
        if (header.BigEndian == BitConverter.IsLittleEndian) SwapBytes<T>(data);
        return header.FortranOrder ? FortranToC(data, header.Shape) : data;
    }

    private static bool[] ReadBools(Stream stream, long count, NpyHeader header, string name)
    {
        var raw = ReadRaw<byte>(stream, count, header, name);
        // NumPy writes 0 and 1, but a bool holding any other byte would compare unequal to true.
        var data = new bool[raw.Length];
        for (int i = 0; i < raw.Length; i++) data[i] = raw[i] != 0;
        return header.FortranOrder ? FortranToC(data, header.Shape) : data;
    }

    /// <summary>
    /// Reads the array's bytes straight into a typed array. A seekable stream is checked for length
    /// first; for any other stream the buffer grows as data arrives, so a header that promises a large
    /// array cannot make the reader allocate it before the bytes exist.
    /// </summary>
    private static T[] ReadRaw<T>(Stream stream, long count, NpyHeader header, string name)
        where T : unmanaged
    {
        int size = header.ItemSize;
        long bytes = count * size;
        if (stream.CanSeek)
        {
            long remaining = Math.Max(0, stream.Length - stream.Position);
            if (remaining < bytes)
                throw TruncatedData(name, header, bytes, remaining);
            var exact = new T[count];
            stream.ReadExactly(MemoryMarshal.AsBytes(exact.AsSpan()));
            return exact;
        }

        var buffer = new T[Math.Min(count, Math.Max(1, InitialChunkBytes / size))];
        long filled = 0;
        while (true)
        {
            var target = MemoryMarshal.AsBytes(buffer.AsSpan()).Slice(checked((int)(filled * size)));
            int read = ReadAtMost(stream, target);
            filled += read / size;
            if (read < target.Length)
                throw TruncatedData(name, header, bytes, filled * size + read % size);
            if (filled == count) return buffer;
            Array.Resize(ref buffer, (int)Math.Min(count, (long)buffer.Length * 2));
        }
    }

    private static void SwapBytes<T>(T[] data)
        where T : unmanaged
    {
        var bytes = MemoryMarshal.AsBytes(data.AsSpan());
        switch (Unsafe.SizeOf<T>())
        {
            case 2:
                var u16 = MemoryMarshal.Cast<byte, ushort>(bytes);
                BinaryPrimitives.ReverseEndianness(u16, u16);
                break;
            case 4:
                var u32 = MemoryMarshal.Cast<byte, uint>(bytes);
                BinaryPrimitives.ReverseEndianness(u32, u32);
                break;
            case 8:
                var u64 = MemoryMarshal.Cast<byte, ulong>(bytes);
                BinaryPrimitives.ReverseEndianness(u64, u64);
                break;
        }
    }

    /// <summary>
    /// Reorders Fortran-order (first index fastest) data into C order (last index fastest) by walking
    /// the C-order output and stepping a Fortran offset alongside it.
    /// </summary>
    internal static T[] FortranToC<T>(T[] source, IReadOnlyList<long> shape)
    {
        int rank = shape.Count;
        if (rank <= 1 || source.Length == 0) return source;
        var fortranStride = new long[rank];
        fortranStride[0] = 1;
        for (int k = 1; k < rank; k++) fortranStride[k] = fortranStride[k - 1] * shape[k - 1];

        var result = new T[source.Length];
        var index = new long[rank];
        long src = 0;
        long last = shape[rank - 1], lastStride = fortranStride[rank - 1];
        for (long dst = 0; dst < result.Length;)
        {
            long s = src;
            for (long j = 0; j < last; j++, s += lastStride) result[dst++] = source[s];
            // Advance the odometer over all but the last axis.
            for (int k = rank - 2; k >= 0; k--)
            {
                index[k]++;
                src += fortranStride[k];
                if (index[k] < shape[k]) break;
                src -= fortranStride[k] * shape[k];
                index[k] = 0;
            }
        }
        return result;
    }

    private static int ReadAtMost(Stream stream, Span<byte> buffer)
    {
        int total = 0;
        while (total < buffer.Length)
        {
            int n = stream.Read(buffer[total..]);
            if (n == 0) break;
            total += n;
        }
        return total;
    }

    private static EngineException Truncated(string name, string where) =>
        DatasetErrors.Invalid($"Array '{name}' is truncated: the file ends {where}.");

    private static EngineException TruncatedData(string name, NpyHeader header, long expected, long present) =>
        DatasetErrors.Invalid(
            $"Array '{name}' is truncated: its header promises {expected} bytes of data " +
            $"({DatasetErrors.TypeName(header.ElementType)}, shape {DatasetErrors.FormatShape(header.Shape)}) but only {present} follow.");
}
