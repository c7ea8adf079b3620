using System.Buffers.Binary;
using System.IO.Compression;

namespace Bitbudget.Service.Tests.Demo;

/// <summary>Reads the raw little-endian payload of one array in an .npz, skipping the .npy header by its stored length; enough for tests to compare files with memory.</summary>
internal static class NpyPayload
{
    public static float[] Float32(string npzPath, string arrayName)
    {
        byte[] payload = Payload(npzPath, arrayName);
        var values = new float[payload.Length / sizeof(float)];
        for (int i = 0; i < values.Length; i++)
        {
            values[i] = BinaryPrimitives.ReadSingleLittleEndian(payload.AsSpan(i * sizeof(float)));
        }

        return values;
    }

    private static byte[] Payload(string npzPath, string arrayName)
    {
        using ZipArchive archive = ZipFile.OpenRead(npzPath);
        ZipArchiveEntry entry = archive.GetEntry(arrayName + ".npy") ?? throw new InvalidOperationException($"{npzPath} has no {arrayName}.npy");
        using var buffer = new MemoryStream();
        using (Stream stream = entry.Open())
        {
            stream.CopyTo(buffer);
        }

        byte[] bytes = buffer.ToArray();
        int headerLength = BinaryPrimitives.ReadUInt16LittleEndian(bytes.AsSpan(8));
        return bytes[(10 + headerLength)..];
    }
}
