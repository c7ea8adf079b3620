using System.Buffers.Binary;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// Edits the size fields of a zip archive in place, to build archives whose headers lie the way a zip
/// bomb's do. Offsets follow the PKWARE APPNOTE.TXT: local file header (signature 0x04034b50)
/// compressed size at +18, uncompressed at +22; central directory header (0x02014b50) compressed
/// size at +20, uncompressed at +24.
/// </summary>
internal static class ZipSurgery
{
    public static void SetUncompressedSizes(byte[] zip, uint claimed)
    {
        int patched = 0;
        for (int i = 0; i + 30 <= zip.Length; i++)
        {
            uint signature = BinaryPrimitives.ReadUInt32LittleEndian(zip.AsSpan(i));
            if (signature == 0x04034b50)
            {
                // With a data descriptor (flag bit 3) the local sizes are zero; only real ones are patched.
                if (BinaryPrimitives.ReadUInt32LittleEndian(zip.AsSpan(i + 22)) != 0)
                    BinaryPrimitives.WriteUInt32LittleEndian(zip.AsSpan(i + 22), claimed);
                patched++;
            }
            else if (signature == 0x02014b50)
            {
                BinaryPrimitives.WriteUInt32LittleEndian(zip.AsSpan(i + 24), claimed);
                patched++;
            }
        }
        if (patched == 0) throw new InvalidOperationException("No zip headers found to patch.");
    }

    public static void RenameMember(byte[] zip, string from, string to)
    {
        if (from.Length != to.Length) throw new ArgumentException("Names must keep their length so offsets stay valid.");
        var fromBytes = System.Text.Encoding.ASCII.GetBytes(from);
        var toBytes = System.Text.Encoding.ASCII.GetBytes(to);
        int found = 0;
        for (int i = 0; i + fromBytes.Length <= zip.Length; i++)
        {
            if (zip.AsSpan(i, fromBytes.Length).SequenceEqual(fromBytes))
            {
                toBytes.CopyTo(zip, i);
                found++;
            }
        }
        if (found == 0) throw new InvalidOperationException($"Member '{from}' not found.");
    }
}
