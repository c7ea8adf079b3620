using Bitbudget.Search.Evaluation;
using static Bitbudget.Search.Tests.Evaluation.DatasetTestData;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// Every fixture read here was written by NumPy 1.24 (Debian's python3-numpy) through
/// tests/Search.Tests/Fixtures/make_fixtures.py; the expected values are that script's formulas.
/// </summary>
public class NpyReaderTests
{
    [Theory]
    [InlineData("f4_le.npy", ElementType.Float32, "f")]
    [InlineData("f4_be.npy", ElementType.Float32, "f")]
    [InlineData("f2_le.npy", ElementType.Float16, "f")]
    [InlineData("f2_be.npy", ElementType.Float16, "f")]
    [InlineData("f8_le.npy", ElementType.Float64, "f")]
    [InlineData("f8_be.npy", ElementType.Float64, "f")]
    [InlineData("i8_le.npy", ElementType.Int64, "i8")]
    [InlineData("i8_be.npy", ElementType.Int64, "i8")]
    [InlineData("i4_le.npy", ElementType.Int32, "i")]
    [InlineData("i4_be.npy", ElementType.Int32, "i")]
    [InlineData("i1.npy", ElementType.Int8, "i1")]
    [InlineData("u1.npy", ElementType.UInt8, "u1")]
    [InlineData("b1.npy", ElementType.Bool, "b1")]
    [InlineData("f4_v2.npy", ElementType.Float32, "f")]
    [InlineData("f4_v3.npy", ElementType.Float32, "f")]
    [InlineData("f4_fortran.npy", ElementType.Float32, "f")]
    [InlineData("i4_fortran_be.npy", ElementType.Int32, "i")]
    public void NumpyWrittenArrayReadsBackInCOrderWithNativeValues(string file, ElementType type, string kind)
    {
        var array = ReadFixture(file);

        Assert.Equal(type, array.ElementType);
        Assert.Equal(FixtureShape, array.Shape);
        var values = ToDoubles(array.Data);
        Assert.Equal(24, values.Length);
        for (int i = 0; i < values.Length; i++)
            Assert.Equal(Expected(kind, i), values[i]);
    }

    [Fact]
    public void ZeroDimensionalArrayIsOneValueWithEmptyShape()
    {
        var array = ReadFixture("f8_scalar.npy");

        Assert.Empty(array.Shape);
        Assert.Equal(1, array.SampleCount);
        Assert.Equal([2.5], (double[])array.Data);
    }

    [Fact]
    public void OneDimensionalArrayKeepsItsLength()
    {
        var array = ReadFixture("i8_vector.npy");

        Assert.Equal([5L], array.Shape);
        Assert.Equal([-4L, -1, 2, 5, 8], (long[])array.Data);
    }

    [Fact]
    public void ArrayWithAZeroDimensionHasNoData()
    {
        var array = ReadFixture("f4_empty.npy");

        Assert.Equal([0L, 3], array.Shape);
        Assert.Empty((float[])array.Data);
    }

    [Theory]
    [InlineData("c8.npy", "'<c8'")]
    [InlineData("object.npy", "'|O'")]
    [InlineData("unicode.npy", "'<U3'")]
    [InlineData("structured.npy", "structured")]
    [InlineData("structured_v3.npy", "structured")]
    public void UnsupportedDtypeIsRefusedNamingIt(string file, string named)
    {
        var e = Refused(() => ReadFixture(file), "dataset-invalid");

        Assert.Contains(named, e.Message);
    }

    [Theory]
    [InlineData(5)]
    [InlineData(9)]
    [InlineData(60)]
    [InlineData(127)]
    public void TruncatedFileIsRefusedAsInvalid(int keep)
    {
        var bytes = File.ReadAllBytes(Fixture("f4_le.npy"))[..keep];

        Refused(() => NpyReader.Read(new MemoryStream(bytes), "x"), "dataset-invalid");
        Refused(() => NpyReader.Read(new OneByteAtATimeStream(bytes), "x"), "dataset-invalid");
    }

    [Fact]
    public void TruncatedDataSaysHowManyBytesWerePromisedAndPresent()
    {
        var bytes = File.ReadAllBytes(Fixture("f4_le.npy"));

        var e = Refused(() => NpyReader.Read(new MemoryStream(bytes[..^10]), "x"), "dataset-invalid");

        Assert.Contains("promises 96 bytes", e.Message);
        Assert.Contains("only 86 follow", e.Message);
    }

    [Fact]
    public void WrongMagicAndUnknownVersionAreRefused()
    {
        var bytes = File.ReadAllBytes(Fixture("f4_le.npy"));
        var notNpy = (byte[])bytes.Clone();
        notNpy[1] = (byte)'X';
        var version4 = (byte[])bytes.Clone();
        version4[6] = 4;

        Assert.Contains("magic", Refused(() => NpyReader.Read(new MemoryStream(notNpy), "x"), "dataset-invalid").Message);
        Assert.Contains("4.0", Refused(() => NpyReader.Read(new MemoryStream(version4), "x"), "dataset-invalid").Message);
    }

    [Fact]
    public void ArrayOverTheLimitIsRefusedBeforeItsDataIsRead()
    {
        // 96 bytes of float32 data against a 95-byte cap; then exactly at the cap it reads.
        Refused(() => ReadFixture("f4_le.npy", new DatasetLimits(MaxArrayBytes: 95)), "dataset-too-large");
        Refused(() => ReadFixture("f4_le.npy", new DatasetLimits(MaxTotalBytes: 95)), "dataset-too-large");
        Assert.Equal(24, ReadFixture("f4_le.npy", new DatasetLimits(MaxArrayBytes: 96)).ElementCount);
    }

    [Fact]
    public void HeaderPromisingHugeArrayOnAStreamWithoutLengthIsRefusedNotAllocated()
    {
        // The header claims 2^40 float32 values; a non-seekable stream must not make us allocate them.
        var header = "{'descr': '<f4', 'fortran_order': False, 'shape': (1099511627776,), }";
        var bytes = PlainHeader(header).Concat(new byte[16]).ToArray();
        var limits = new DatasetLimits(MaxTotalBytes: long.MaxValue, MaxArrayBytes: long.MaxValue);

        var e = Refused(() => NpyReader.Read(new OneByteAtATimeStream(bytes), "x", limits), "dataset-too-large");
        Assert.Contains("more elements than one array can hold", e.Message);

        var fits = "{'descr': '<f4', 'fortran_order': False, 'shape': (100000000,), }";
        var truncated = PlainHeader(fits).Concat(new byte[16]).ToArray();
        Assert.Contains("only 16 follow", Refused(() => NpyReader.Read(new OneByteAtATimeStream(truncated), "x", limits), "dataset-invalid").Message);
    }

    [Theory]
    [InlineData("{'descr': '<f4', 'shape': (2,), }", "fortran_order")]
    [InlineData("{'descr': '<f4', 'fortran_order': False, }", "shape")]
    [InlineData("{'descr': '<f4', 'fortran_order': False, 'shape': (-2,), }", "negative")]
    [InlineData("{'descr': '<f4', 'fortran_order': False, 'shape': (2,)", "ends")]
    [InlineData("{'descr': 'f4', 'fortran_order': False, 'shape': (2,), }", "byte-order")]
    public void MalformedHeaderIsRefusedSayingWhat(string header, string said)
    {
        var bytes = PlainHeader(header).Concat(new byte[8]).ToArray();

        Assert.Contains(said, Refused(() => NpyReader.Read(new MemoryStream(bytes), "x"), "dataset-invalid").Message);
    }

    [Fact]
    public void ArraysWrittenBackToBackReadOneAfterAnother()
    {
        var a = Floats("a", [3], i => i);
        var b = Floats("b", [2, 2], i => -i);
        var stream = new MemoryStream([.. NpyBytes(a), .. NpyBytes(b)]);

        Assert.Equal([0f, 1, 2], (float[])NpyReader.Read(stream, "a").Data);
        Assert.Equal([0f, -1, -2, -3], (float[])NpyReader.Read(stream, "b").Data);
        Assert.Equal(stream.Length, stream.Position);
    }

    [Theory]
    [InlineData(new long[] { 5 })]
    [InlineData(new long[] { 2, 3 })]
    [InlineData(new long[] { 3, 1, 4 })]
    [InlineData(new long[] { 2, 3, 4, 5 })]
    [InlineData(new long[] { 7, 9, 1, 2, 3 })]
    public void FortranToCMatchesAPlainIndexFormula(long[] shape)
    {
        int n = (int)shape.Aggregate(1L, (a, d) => a * d);
        var fortran = new int[n];
        var rng = new Random(7);
        for (int i = 0; i < n; i++) fortran[i] = rng.Next();

        var c = NpyReader.FortranToC(fortran, shape);

        // Scalar reference: C index -> multi-index -> Fortran offset.
        for (int flat = 0; flat < n; flat++)
        {
            long rest = flat, offset = 0, stride = 1;
            var index = new long[shape.Length];
            for (int k = shape.Length - 1; k >= 0; k--) { index[k] = rest % shape[k]; rest /= shape[k]; }
            for (int k = 0; k < shape.Length; k++) { offset += index[k] * stride; stride *= shape[k]; }
            Assert.Equal(fortran[offset], c[flat]);
        }
    }

    internal static byte[] PlainHeader(string dict)
    {
        int total = (10 + dict.Length + 1 + 63) / 64 * 64;
        var text = dict + new string(' ', total - 10 - dict.Length - 1) + "\n";
        var bytes = new byte[10 + text.Length];
        byte[] magic = [0x93, (byte)'N', (byte)'U', (byte)'M', (byte)'P', (byte)'Y'];
        magic.CopyTo(bytes, 0);
        bytes[6] = 1;
        bytes[8] = (byte)(text.Length & 0xff);
        bytes[9] = (byte)(text.Length >> 8);
        System.Text.Encoding.Latin1.GetBytes(text).CopyTo(bytes, 10);
        return bytes;
    }
}
