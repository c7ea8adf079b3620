namespace Bitbudget.Search.Evaluation;

/// <summary>
/// CRC-32 as zip archives store it (PKWARE APPNOTE.TXT 4.4.7: polynomial 0xEDB88320, reflected, initial and
/// final value 0xFFFFFFFF). ZipArchive does not check it on read here, so a damaged member would be accepted
/// where NumPy's loader (Python's zipfile) refuses it.
/// </summary>
internal static class Crc32
{
    private static readonly uint[] Table = BuildTable();

    /// <summary>Continues a running CRC (start from 0) over <paramref name="bytes"/>.</summary>
    public static uint Append(uint crc, ReadOnlySpan<byte> bytes)
    {
        crc = ~crc;
        foreach (var b in bytes)
            crc = Table[(crc ^ b) & 0xFF] ^ (crc >> 8);
        return ~crc;
    }

    private static uint[] BuildTable()
    {
        var table = new uint[256];
        for (uint i = 0; i < 256; i++)
        {
            uint c = i;
            for (int k = 0; k < 8; k++)
                c = (c & 1) != 0 ? 0xEDB88320u ^ (c >> 1) : c >> 1;
            table[i] = c;
        }
        return table;
    }
}
