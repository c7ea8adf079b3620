using System.Buffers.Binary;
using System.Globalization;
using System.IO.Compression;
using System.Text;

namespace Bitbudget.Service.Demo;

/// <summary>
/// Just enough .npy/.npz writing for the demo files: .npy format version 1.0, little endian,
/// C order; .npz as a deflated ZIP of "NAME.npy" entries with a fixed entry time so two runs give
/// byte-identical files. Layout per the NumPy format description (numpy.lib.format, NEP 1).
/// </summary>
internal static class DemoArrays
{
    // The earliest time a ZIP (MS-DOS) timestamp can hold.
    private static readonly DateTimeOffset FixedEntryTime = new(1980, 1, 1, 0, 0, 0, TimeSpan.Zero);

    private static ReadOnlySpan<byte> Magic => [0x93, (byte)'N', (byte)'U', (byte)'M', (byte)'P', (byte)'Y', 1, 0];

    public static byte[] Float32Npy(ReadOnlySpan<float> values, ReadOnlySpan<int> shape)
    {
        CheckShape(values.Length, shape);
        byte[] header = Header("<f4", shape);
        var bytes = new byte[header.Length + (values.Length * sizeof(float))];
        header.CopyTo(bytes, 0);
        for (int i = 0; i < values.Length; i++)
        {
            BinaryPrimitives.WriteSingleLittleEndian(bytes.AsSpan(header.Length + (i * sizeof(float))), values[i]);
        }

        return bytes;
    }

    public static byte[] Int64Npy(ReadOnlySpan<long> values, ReadOnlySpan<int> shape)
    {
        CheckShape(values.Length, shape);
        byte[] header = Header("<i8", shape);
        var bytes = new byte[header.Length + (values.Length * sizeof(long))];
        header.CopyTo(bytes, 0);
        for (int i = 0; i < values.Length; i++)
        {
            BinaryPrimitives.WriteInt64LittleEndian(bytes.AsSpan(header.Length + (i * sizeof(long))), values[i]);
        }

        return bytes;
    }

    /// <summary>Packs named .npy payloads into .npz bytes; entries keep the given order.</summary>
    public static byte[] Npz(IReadOnlyList<KeyValuePair<string, byte[]>> arrays)
    {
        using var buffer = new MemoryStream();
        using (var archive = new ZipArchive(buffer, ZipArchiveMode.Create, leaveOpen: true))
        {
            foreach ((string name, byte[] npy) in arrays)
            {
                ZipArchiveEntry entry = archive.CreateEntry(name + ".npy", CompressionLevel.Optimal);
                entry.LastWriteTime = FixedEntryTime;
                using Stream stream = entry.Open();
                stream.Write(npy);
            }
        }

        return buffer.ToArray();
    }

    public static byte[] SampleSetNpz(HiveSoundSet set) =>
        Npz(
        [
            new("spectrogram", Float32Npy(set.Spectrograms, set.Shape)),
            new("labels", Int64Npy(set.Labels, [set.Count])),
        ]);

    private static byte[] Header(string descriptor, ReadOnlySpan<int> shape)
    {
        var dims = new StringBuilder();
        foreach (int d in shape)
        {
            dims.Append(d.ToString(CultureInfo.InvariantCulture)).Append(", ");
        }

        // A 1-d shape keeps its trailing comma as a Python tuple; longer ones drop the last ", ".
        string tuple = shape.Length == 1 ? dims.ToString().TrimEnd() : dims.ToString().TrimEnd(',', ' ');
        string dictionary = $"{{'descr': '{descriptor}', 'fortran_order': False, 'shape': ({tuple}), }}";

        // Magic (8) + length (2) + dictionary + padding spaces + '\n' is a multiple of 64, as NumPy writes it.
        int unpadded = Magic.Length + 2 + dictionary.Length + 1;
        int padded = (unpadded + 63) / 64 * 64;
        string text = dictionary + new string(' ', padded - unpadded) + "\n";
        var header = new byte[padded];
        Magic.CopyTo(header);
        BinaryPrimitives.WriteUInt16LittleEndian(header.AsSpan(Magic.Length), (ushort)text.Length);
        Encoding.ASCII.GetBytes(text, header.AsSpan(Magic.Length + 2));
        return header;
    }

    private static void CheckShape(int length, ReadOnlySpan<int> shape)
    {
        long product = 1;
        foreach (int d in shape)
        {
            product *= d;
        }

        if (product != length)
        {
            throw new ArgumentException($"The shape holds {product} elements but {length} values were given.", nameof(shape));
        }
    }
}
