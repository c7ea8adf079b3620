using System.Globalization;
using System.Text.Json;
using Bitbudget.Search;
using Bitbudget.Search.Evaluation;
using Bitbudget.Service.Demo;

namespace Bitbudget.Service.Tests.Demo;

/// <summary>
/// Outside check: NumPy (Debian's python3-numpy, numpy.load) reads the files the demo writes and
/// the shared .npz writer's output (NpzWriter, which the demo uses) for edge shapes; shapes, dtypes, label counts and sums must match C#.
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class NumPyReadsDemoFilesTests(DemoFolderFixture demo)
{
    // Prints, per array: dtype string, shape, element count, the float64 sum, and the sum of the raw
    // bit patterns as an exact integer (one flipped byte anywhere changes it).
    private const string DescribeScript = """
        import json, sys
        import numpy as np
        d = np.load(sys.argv[1])
        out = {}
        for name in d.files:
            a = d[name]
            item = {"dtype": a.dtype.str, "shape": list(a.shape), "fortran": bool(np.isfortran(a) and a.ndim > 1)}
            if a.dtype == np.float32:
                item["sum"] = float(a.astype(np.float64).sum())
                item["bits"] = int(a.view(np.uint32).astype(np.uint64).sum())
            else:
                item["sum"] = int(a.sum())
                item["bits"] = int(a.view(np.uint64).astype(object).sum()) if a.size else 0
                if a.ndim == 1 and a.size and a.min() >= 0:
                    item["counts"] = [int(c) for c in np.bincount(a)]
            out[name] = item
        print(json.dumps(out))
        """;

    [Theory]
    [InlineData(HiveMonitorScenario.CalibrationFileName, HiveMonitorScenario.CalibrationCount)]
    [InlineData(HiveMonitorScenario.HoldoutFileName, HiveMonitorScenario.HoldoutCount)]
    public void NumPyReadsTheSetWithTheRightShapesDtypesLabelCountsAndSums(string fileName, int count)
    {
        HiveSoundSet set = fileName == HiveMonitorScenario.CalibrationFileName ? demo.Result.Calibration : demo.Result.Holdout;
        JsonElement described = Describe(demo.PathOf(fileName));

        JsonElement spectrogram = described.GetProperty("spectrogram");
        Assert.Equal("<f4", spectrogram.GetProperty("dtype").GetString());
        Assert.Equal([count, 1, 16, 16], Shape(spectrogram));
        Assert.False(spectrogram.GetProperty("fortran").GetBoolean());
        Assert.Equal(FloatBitSum(set.Spectrograms), spectrogram.GetProperty("bits").GetDecimal());
        double sum = set.Spectrograms.Sum(v => (double)v);
        Assert.Equal(sum, spectrogram.GetProperty("sum").GetDouble(), 1e-9 * Math.Max(1.0, Math.Abs(sum)));

        JsonElement labels = described.GetProperty("labels");
        Assert.Equal("<i8", labels.GetProperty("dtype").GetString());
        Assert.Equal([count], Shape(labels));
        Assert.Equal(set.Labels.Sum(), labels.GetProperty("sum").GetInt64());
        int[] counts = labels.GetProperty("counts").EnumerateArray().Select(e => e.GetInt32()).ToArray();
        Assert.Equal(Enumerable.Repeat(count / 4, 4), counts);
    }

    [Theory]
    [InlineData(new int[] { 0 })]
    [InlineData(new int[] { 1 })]
    [InlineData(new int[] { 17 })]
    [InlineData(new int[] { 2, 3, 4 })]
    [InlineData(new int[] { 3, 1, 16, 16 })]
    public void NumPyReadsTheArrayWriterAtEdgeShapes(int[] shape)
    {
        int length = shape.Aggregate(1, (a, b) => a * b);
        float[] floats = Enumerable.Range(0, length).Select(i => (float)((i * 0.37) - 3.1)).ToArray();
        long[] longs = Enumerable.Range(0, length).Select(i => ((long)i * 1_000_000_007L) - 5).ToArray();
        string path = Path.Combine(demo.Folder, $"edge-{string.Join('x', shape)}.npz");
        long[] dims = shape.Select(d => (long)d).ToArray();
        using (FileStream file = File.Create(path))
        {
            NpzWriter.Write(
                file,
                [
                    new NpyArray("floats", ElementType.Float32, dims, floats),
                    new NpyArray("longs", ElementType.Int64, dims, longs),
                ]);
        }

        JsonElement described = Describe(path);
        JsonElement f = described.GetProperty("floats");
        Assert.Equal("<f4", f.GetProperty("dtype").GetString());
        Assert.Equal(shape, Shape(f));
        Assert.Equal(FloatBitSum(floats), f.GetProperty("bits").GetDecimal());
        JsonElement l = described.GetProperty("longs");
        Assert.Equal("<i8", l.GetProperty("dtype").GetString());
        Assert.Equal(shape, Shape(l));
        Assert.Equal(longs.Sum(), l.GetProperty("sum").GetInt64());
    }

    private static JsonElement Describe(string npzPath)
    {
        string json = NumPyProcess.Run(DescribeScript, npzPath);
        using JsonDocument document = JsonDocument.Parse(json);
        return document.RootElement.Clone();
    }

    private static int[] Shape(JsonElement array) => array.GetProperty("shape").EnumerateArray().Select(e => e.GetInt32()).ToArray();

    private static decimal FloatBitSum(float[] values)
    {
        decimal sum = 0;
        foreach (float v in values)
        {
            sum += BitConverter.SingleToUInt32Bits(v);
        }

        return sum;
    }
}
