using Bitbudget.Search.Evaluation;
using static Bitbudget.Search.Tests.Evaluation.DatasetTestData;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// <see cref="DatasetReader.Inspect"/>, the upload path: it must describe a dataset exactly as decoding would,
/// refuse one whose .npy headers decode past the limit before inflating any data, and never hold the data.
/// </summary>
public sealed class DatasetInspectionTests
{
    [Theory]
    [InlineData("compressed.npz")]
    [InlineData("plain.npz")]
    [InlineData("f4_fortran.npy")]
    [InlineData("i8_be.npy")]
    [InlineData("f8_scalar.npy")]
    public void InspectionDescribesNumPyFilesAsDecodingDoes(string fixture)
    {
        // The fixtures are written by NumPy (make_fixtures.py); decoding them is checked value by value elsewhere.
        var bytes = File.ReadAllBytes(Fixture(fixture));
        var decoded = DatasetReader.Read(bytes);

        var described = DatasetReader.Inspect(new MemoryStream(bytes));

        Assert.Equal(decoded.Select(a => (a.Name, a.ElementType, string.Join(",", a.Shape), a.ByteCount)), described.Select(a => (a.Name, a.ElementType, string.Join(",", a.Shape), a.ByteCount)));
    }

    [Fact]
    public void HeadersThatSumPastTheLimitAreRefusedBeforeAnyDataInflates()
    {
        // Two members of 3 MiB each against a 4 MiB total: each alone is under the limit, together they are not.
        // Values that hardly compress, so the file is large next to what the zip directory and two headers take.
        var random = new Random(4);
        var a = Floats("a", [3 * 1024, 256], _ => random.NextSingle());
        var b = Floats("b", [3 * 1024, 256], _ => random.NextSingle());
        var npz = NpzBytes([a, b], compress: true);
        var counting = new CountingStream(new MemoryStream(npz));

        var refusal = Refused(() => DatasetReader.Inspect(counting, new DatasetLimits(MaxTotalBytes: 4L << 20, MaxArrayBytes: 4L << 20)), "dataset-too-large");

        Assert.Contains("6 MiB", refusal.Message, StringComparison.Ordinal);
        // Each sample is one float32 row of 256 in each array, 2 KiB in all, so 4 MiB holds 2048 of them.
        Assert.Contains("at most 2048 of its 3072 samples would fit", refusal.Message, StringComparison.Ordinal);
        // Only the zip directory and the two headers were read: a small part of the compressed file.
        Assert.True(counting.BytesRead < npz.Length / 4, $"Read {counting.BytesRead} of {npz.Length} bytes before refusing.");
    }

    [Fact]
    public void InspectionFindsATruncatedMemberWithoutHoldingIt()
    {
        var npy = NpyBytes(Floats("x", [1024, 256], i => i % 3));
        var npz = NpzBytes([Floats("x", [1024, 256], i => i % 3)], compress: false);
        // Stored (uncompressed) member: cut its data short by rewriting nothing but the header's first dimension upwards.
        var text = System.Text.Encoding.Latin1.GetString(npz);
        var patched = System.Text.Encoding.Latin1.GetBytes(text.Replace("(1024, 256)", "(2048, 256)", StringComparison.Ordinal));
        Assert.Equal(npz.Length, patched.Length);

        var refusal = Refused(() => DatasetReader.Inspect(new MemoryStream(patched)), "dataset-invalid");

        Assert.Contains("truncated", refusal.Message, StringComparison.Ordinal);
        Assert.True(npy.Length > 1 << 20);
    }

    /// <summary>Counts the bytes read through it.</summary>
    private sealed class CountingStream(Stream inner) : Stream
    {
        public long BytesRead { get; private set; }

        public override bool CanRead => true;

        public override bool CanSeek => inner.CanSeek;

        public override bool CanWrite => false;

        public override long Length => inner.Length;

        public override long Position
        {
            get => inner.Position;
            set => inner.Position = value;
        }

        public override int Read(byte[] buffer, int offset, int count)
        {
            var n = inner.Read(buffer, offset, count);
            BytesRead += n;
            return n;
        }

        public override long Seek(long offset, SeekOrigin origin) => inner.Seek(offset, origin);

        public override void Flush()
        {
        }

        public override void SetLength(long value) => throw new NotSupportedException();

        public override void Write(byte[] buffer, int offset, int count) => throw new NotSupportedException();
    }
}
