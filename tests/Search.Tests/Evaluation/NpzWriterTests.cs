using System.Buffers.Binary;
using System.IO.Compression;
using Bitbudget.Search.Evaluation;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// The .npz writer's archives are deterministic: every member is stamped with the ZIP epoch rather
/// than the clock. Header offsets and the MS-DOS date layout follow the PKWARE APPNOTE.TXT (4.3.7
/// local file header: time at +10, date at +12; 4.3.12 central directory header: time at +12,
/// date at +14; 4.4.6: date bits 15-9 year - 1980, 8-5 month, 4-0 day; time bits 15-11 hour,
/// 10-5 minute, 4-0 seconds / 2).
/// </summary>
public sealed class NpzWriterTests
{
    private const uint LocalHeaderSignature = 0x04034b50;
    private const uint CentralHeaderSignature = 0x02014b50;

    // 1980-01-01: year offset 0, month 1, day 1.
    private const ushort ZipEpochDate = (0 << 9) | (1 << 5) | 1;
    private const ushort Midnight = 0;

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public void EveryMemberIsStampedWithTheZipEpochInBothHeaders(bool compress)
    {
        var zip = Write(Arrays(), compress);

        var local = Stamps(zip, LocalHeaderSignature, timeOffset: 10);
        var central = Stamps(zip, CentralHeaderSignature, timeOffset: 12);
        Assert.Equal(2, local.Count);
        Assert.Equal(2, central.Count);
        Assert.All(local.Concat(central), stamp => Assert.Equal((Midnight, ZipEpochDate), stamp));

        using var archive = new ZipArchive(new MemoryStream(zip), ZipArchiveMode.Read);
        Assert.All(archive.Entries, entry => Assert.Equal(new DateTime(1980, 1, 1), entry.LastWriteTime.DateTime));
        Assert.Equal(new DateTimeOffset(1980, 1, 1, 0, 0, 0, TimeSpan.Zero), NpzWriter.EntryTime);
    }

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public void SameArraysGiveByteIdenticalArchivesThatReadBack(bool compress)
    {
        var first = Write(Arrays(), compress);
        var second = Write(Arrays(), compress);
        Assert.Equal(first, second);

        var read = DatasetReader.Read(first);
        Assert.Equal(["x", "labels"], read.Select(a => a.Name));
        Assert.Equal((float[])Arrays()[0].Data, (float[])read[0].Data);
        Assert.Equal((long[])Arrays()[1].Data, (long[])read[1].Data);
    }

    private static NpyArray[] Arrays() =>
    [
        new("x", ElementType.Float32, [3, 5], Enumerable.Range(0, 15).Select(i => (i * 0.37f) - 2.5f).ToArray()),
        new("labels", ElementType.Int64, [3], new long[] { 2, 0, 7 }),
    ];

    private static byte[] Write(IReadOnlyList<NpyArray> arrays, bool compress)
    {
        using var stream = new MemoryStream();
        NpzWriter.Write(stream, arrays, compress);
        return stream.ToArray();
    }

    private static List<(ushort Time, ushort Date)> Stamps(byte[] zip, uint signature, int timeOffset)
    {
        var stamps = new List<(ushort, ushort)>();
        for (var i = 0; i + timeOffset + 4 <= zip.Length; i++)
        {
            if (BinaryPrimitives.ReadUInt32LittleEndian(zip.AsSpan(i)) == signature)
            {
                stamps.Add((BinaryPrimitives.ReadUInt16LittleEndian(zip.AsSpan(i + timeOffset)), BinaryPrimitives.ReadUInt16LittleEndian(zip.AsSpan(i + timeOffset + 2))));
            }
        }

        return stamps;
    }
}
