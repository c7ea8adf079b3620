using Bitbudget.Search.Evaluation;
using static Bitbudget.Search.Tests.Evaluation.DatasetTestData;

namespace Bitbudget.Search.Tests.Evaluation;

public class DatasetReaderTests
{
    [Fact]
    public void SingleNpyBecomesOneArrayNamedInput()
    {
        // f4_fortran.npy: written by NumPy (make_fixtures.py) in Fortran order.
        var arrays = DatasetReader.Read(File.ReadAllBytes(Fixture("f4_fortran.npy")));

        var array = Assert.Single(arrays);
        Assert.Equal(DatasetReader.SingleArrayName, array.Name);
        Assert.Equal(Enumerable.Range(0, 24).Select(i => (float)Expected("f", i)), (float[])array.Data);
    }

    [Fact]
    public void ZipSignatureMeansNpz()
    {
        var arrays = DatasetReader.Read(File.ReadAllBytes(Fixture("compressed.npz")));

        Assert.Equal(["x", "labels"], arrays.Select(a => a.Name).Order(StringComparer.Ordinal).Reverse());
    }

    [Fact]
    public void NpyWithASecondArrayAfterTheFirstIsRefused()
    {
        var one = NpyBytes(Floats("a", [2], i => i));

        var e = Refused(() => DatasetReader.Read([.. one, .. one]), "dataset-invalid");
        Assert.Contains(".npz", e.Message);
    }

    [Fact]
    public void NeitherNpyNorNpzIsRefused()
    {
        Assert.Contains("neither", Refused(() => DatasetReader.Read("a,b,c\n1,2,3\n"u8.ToArray()), "dataset-invalid").Message);
        Assert.Contains("empty", Refused(() => DatasetReader.Read([]), "dataset-invalid").Message);
    }

    [Fact]
    public void LimitsReachTheReaders()
    {
        var npy = NpyBytes(Floats("a", [100], i => i));

        Refused(() => DatasetReader.Read(npy, new DatasetLimits(MaxTotalBytes: 399)), "dataset-too-large");
        Assert.Single(DatasetReader.Read(npy, new DatasetLimits(MaxTotalBytes: 400)));
    }
}
