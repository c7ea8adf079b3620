using System.Text;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Tests.Store;

public sealed class BlobStoreTests : IDisposable
{
    private readonly string root = Path.Combine(Path.GetTempPath(), "bitbudget-tests", Guid.NewGuid().ToString("N"));

    [Fact]
    public void BlobIsNamedByTheSha256OfItsBytes()
    {
        var blobs = new BlobStore(root);

        var sha = blobs.Put("abc"u8);

        // FIPS 180-2, appendix B.1: SHA-256("abc").
        Assert.Equal("ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad", sha);
        Assert.Equal(Path.Combine(root, "ba", sha), blobs.PathOf(sha));
        Assert.Equal("abc", Encoding.ASCII.GetString(blobs.Read(sha)));
    }

    [Fact]
    public void WriteLeavesNoTemporaryFileBehind()
    {
        var blobs = new BlobStore(root);

        blobs.Put(new byte[100_000]);

        Assert.Empty(Directory.EnumerateFiles(Path.Combine(root, "tmp")));
    }

    [Fact]
    public void StoringKnownContentAgainDoesNotRewriteIt()
    {
        var blobs = new BlobStore(root);
        var sha = blobs.Put("same"u8);
        var old = new DateTime(2020, 1, 1, 0, 0, 0, DateTimeKind.Utc);
        File.SetLastWriteTimeUtc(blobs.PathOf(sha), old);

        Assert.Equal(sha, blobs.Put("same"u8));

        Assert.Equal(old, File.GetLastWriteTimeUtc(blobs.PathOf(sha)));
    }

    [Fact]
    public async Task ConcurrentWritersOfTheSameContentEndWithOneCompleteFile()
    {
        var blobs = new BlobStore(root);
        var bytes = Enumerable.Range(0, 1 << 20).Select(i => (byte)(i * 31)).ToArray();

        var names = await Task.WhenAll(Enumerable.Range(0, 8).Select(_ => Task.Run(() => blobs.Put(bytes))));

        Assert.Single(names.Distinct());
        Assert.Equal(bytes, blobs.Read(names[0]));
        Assert.Empty(Directory.EnumerateFiles(Path.Combine(root, "tmp")));
    }

    [Fact]
    public void ReadOfAMissingBlobSaysWhichOne()
    {
        var blobs = new BlobStore(root);
        var missing = new string('a', 64);

        var error = Assert.Throws<FileNotFoundException>(() => blobs.Read(missing));

        Assert.Contains(missing, error.Message, StringComparison.Ordinal);
    }

    [Theory]
    [InlineData("../../etc/passwd")]
    [InlineData("BA7816BF8F01CFEA414140DE5DAE2223B00361A396177A9CB410FF61F20015AD")]
    [InlineData("abc")]
    public void NamesThatAreNoSha256AreRefused(string name)
    {
        Assert.Throws<ArgumentException>(() => new BlobStore(root).PathOf(name));
    }

    public void Dispose()
    {
        if (Directory.Exists(root))
        {
            Directory.Delete(root, recursive: true);
        }
    }
}
