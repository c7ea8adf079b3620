using System.IO.Compression;
using Bitbudget.Search.Evaluation;
using static Bitbudget.Search.Tests.Evaluation.DatasetTestData;

namespace Bitbudget.Search.Tests.Evaluation;

public class NpzReaderTests
{
    /// <summary>plain.npz is np.savez output (stored members), compressed.npz np.savez_compressed (deflated); both by make_fixtures.py.</summary>
    [Theory]
    [InlineData("plain.npz")]
    [InlineData("compressed.npz")]
    public void NumpyWrittenArchiveGivesEveryArrayByName(string file)
    {
        using var stream = File.OpenRead(Fixture(file));

        var arrays = NpzReader.Read(stream);

        var x = Assert.Single(arrays, a => a.Name == "x");
        var labels = Assert.Single(arrays, a => a.Name == "labels");
        Assert.Equal(2, arrays.Count);
        Assert.Equal(FixtureShape, x.Shape);
        Assert.Equal(Enumerable.Range(0, 24).Select(i => (float)Expected("f", i)), (float[])x.Data);
        Assert.Equal(ElementType.Int64, labels.ElementType);
        Assert.Equal([1L, 0], (long[])labels.Data);
    }

    [Theory]
    [InlineData("../../evil.npy", "'..'")]
    [InlineData("a/../../evil.npy", "'..'")]
    [InlineData("..\\evil.npy", "'..'")]
    [InlineData("/etc/evil.npy", "absolute")]
    [InlineData("\\evil.npy", "absolute")]
    [InlineData("C:evil.npy", "drive letter")]
    [InlineData("x/", "directory")]
    public void MemberNameThatIsAPathOutOfTheArchiveIsRefused(string member, string why)
    {
        using var zip = new MemoryStream();
        using (var archive = new ZipArchive(zip, ZipArchiveMode.Create, leaveOpen: true))
        {
            using var entry = archive.CreateEntry(member).Open();
            if (!member.EndsWith('/')) NpyWriter.Write(entry, Floats("x", [2], i => i));
        }
        zip.Position = 0;

        var e = Refused(() => NpzReader.Read(zip), "dataset-bad-member-name");
        Assert.Contains(member, e.Message);
        Assert.Contains(why, e.Message);
    }

    [Fact]
    public void MemberNameWithASlashInsideIsAnArrayName()
    {
        // Graph input names exported from some frameworks hold '/' and ':'; np.savez keeps them as member paths.
        var zip = NpzBytes([Floats("scope/input:0", [2], i => i)]);

        Assert.Equal("scope/input:0", Assert.Single(NpzReader.Read(new MemoryStream(zip))).Name);
    }

    [Fact]
    public void MemberThatInflatesAbsurdlyIsRefusedAsAZipBomb()
    {
        // 8 MiB of zeros deflates to a few KiB (about 1000:1), far past the default cap of 200:1.
        var zip = NpzBytes([new NpyArray("x", ElementType.Float32, [1 << 21], new float[1 << 21])]);
        Assert.True(zip.Length < (8 << 20) / 200, $"the test archive should be small, is {zip.Length} bytes");

        var e = Refused(() => NpzReader.Read(new MemoryStream(zip)), "dataset-too-large");
        Assert.Contains("zip bomb", e.Message);

        // The same bytes are fine once the caller allows that ratio.
        Assert.Single(NpzReader.Read(new MemoryStream(zip), new DatasetLimits(MaxCompressionRatio: 5000)));
    }

    [Fact]
    public void MemberWhoseHeaderClaimsLessThanItInflatesToIsCutAtTheClaim()
    {
        // The zip headers say 1000 bytes; the deflated data would inflate to 4 MiB. The inflater must stop
        // at the claim (System.IO.Compression bounds it), so the array reads as truncated, not as 4 MiB.
        var zip = NpzBytes([new NpyArray("x", ElementType.Float32, [1 << 20], new float[1 << 20])]);
        ZipSurgery.SetUncompressedSizes(zip, 1000);

        var e = Refused(() => NpzReader.Read(new MemoryStream(zip), new DatasetLimits(MaxCompressionRatio: 1e9)), "dataset-invalid");
        Assert.Contains("truncated", e.Message);
    }

    [Fact]
    public void InflatingStreamIsStoppedAtItsCapWhateverTheHeadersSay()
    {
        // The guard counts bytes that really come out of the inflater: 64 KiB of zeros against a 10 000-byte cap.
        var deflated = new MemoryStream();
        using (var d = new DeflateStream(deflated, CompressionLevel.Optimal, leaveOpen: true)) d.Write(new byte[64 * 1024]);
        deflated.Position = 0;
        using var guarded = new LimitedReadStream(new DeflateStream(deflated, CompressionMode.Decompress), "x.npy", 10_000, deflated.Length, 1e9);

        var e = Refused(() => guarded.CopyTo(Stream.Null), "dataset-too-large");
        Assert.Contains("(10000 bytes)", e.Message);
        Assert.True(guarded.BytesRead < 10_000 + 64 * 1024);
    }

    [Fact]
    public void InflatingStreamIsStoppedPastTheRatioOnceOverTheFloor()
    {
        var deflated = new MemoryStream();
        using (var d = new DeflateStream(deflated, CompressionLevel.Optimal, leaveOpen: true)) d.Write(new byte[4 << 20]);
        deflated.Position = 0;
        long compressed = deflated.Length;
        using var guarded = new LimitedReadStream(new DeflateStream(deflated, CompressionMode.Decompress), "x.npy", long.MaxValue, compressed, 200);

        var e = Refused(() => guarded.CopyTo(Stream.Null), "dataset-too-large");
        Assert.Contains("zip bomb", e.Message);
        // Stopped soon after the 1 MiB floor, not after all 4 MiB.
        Assert.True(guarded.BytesRead < (2 << 20), $"read {guarded.BytesRead} bytes");
    }

    [Fact]
    public void ArrayOverThePerArrayCapIsRefused()
    {
        var zip = NpzBytes([Floats("x", [1000], i => i)], compress: false);

        var e = Refused(() => NpzReader.Read(new MemoryStream(zip), new DatasetLimits(MaxArrayBytes: 3999)), "dataset-too-large");
        Assert.Contains("Array 'x' holds 3.91 KiB (4000 bytes)", e.Message);
        Assert.Single(NpzReader.Read(new MemoryStream(zip), new DatasetLimits(MaxArrayBytes: 4000)));
    }

    [Fact]
    public void ArraysOverTheTotalCapAreRefusedEvenWhenEachFits()
    {
        var zip = NpzBytes([Floats("a", [1000], i => i), Floats("b", [1000], i => i)], compress: false);

        Refused(() => NpzReader.Read(new MemoryStream(zip), new DatasetLimits(MaxTotalBytes: 7999)), "dataset-too-large");
        Assert.Equal(2, NpzReader.Read(new MemoryStream(zip), new DatasetLimits(MaxTotalBytes: 8000)).Count);
    }

    [Fact]
    public void TooManyMembersAreRefused()
    {
        var zip = NpzBytes(Enumerable.Range(0, 5).Select(i => Floats($"a{i}", [1], _ => i)).ToList());

        Assert.Contains("5 members", Refused(() => NpzReader.Read(new MemoryStream(zip), new DatasetLimits(MaxArrays: 4)), "dataset-too-large").Message);
        Assert.Equal(5, NpzReader.Read(new MemoryStream(zip), new DatasetLimits(MaxArrays: 5)).Count);
    }

    [Fact]
    public void CorruptArchiveAndCorruptMemberAreInvalid()
    {
        var zip = File.ReadAllBytes(Fixture("compressed.npz"));
        var noDirectory = zip[..^30];
        var damaged = (byte[])zip.Clone();
        for (int i = 60; i < 120; i++) damaged[i] ^= 0x5a;

        Refused(() => NpzReader.Read(new MemoryStream(noDirectory)), "dataset-invalid");
        Refused(() => NpzReader.Read(new MemoryStream(damaged)), "dataset-invalid");
    }

    [Fact]
    public void DuplicateMembersAndTrailingBytesInAMemberAreInvalid()
    {
        var zip = NpzBytes([Floats("a", [2], i => i), Floats("b", [2], i => i)], compress: false);
        ZipSurgery.RenameMember(zip, "b.npy", "a.npy");
        Assert.Contains("two members", Refused(() => NpzReader.Read(new MemoryStream(zip)), "dataset-invalid").Message);

        using var withTail = new MemoryStream();
        using (var archive = new ZipArchive(withTail, ZipArchiveMode.Create, leaveOpen: true))
        {
            using var entry = archive.CreateEntry("x.npy").Open();
            NpyWriter.Write(entry, Floats("x", [2], i => i));
            entry.Write([1, 2, 3]);
        }
        withTail.Position = 0;
        Assert.Contains("bytes after its array", Refused(() => NpzReader.Read(withTail), "dataset-invalid").Message);
    }

    [Fact]
    public void EmptyArchiveIsInvalid()
    {
        using var zip = new MemoryStream();
        new ZipArchive(zip, ZipArchiveMode.Create, leaveOpen: true).Dispose();

        Assert.Contains("no arrays", Refused(() => NpzReader.Read(new MemoryStream(zip.ToArray())), "dataset-invalid").Message);
    }
}
