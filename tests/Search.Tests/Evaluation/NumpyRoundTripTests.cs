using System.Diagnostics;
using System.Text.Json;
using Bitbudget.Search.Evaluation;
using static Bitbudget.Search.Tests.Evaluation.DatasetTestData;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// Files our writers produce are read back by NumPy itself (Debian's python3-numpy at /usr/bin/python3,
/// which CI installs; these tests fail, not skip, without it), and NumPy's shapes, dtypes and sums must
/// match what we wrote.
/// </summary>
public class NumpyRoundTripTests
{
    private const string Python = "/usr/bin/python3";

    // Per array: shape, dtype string, plain sum, and a position-weighted sum that catches reordered values.
    private const string Summarise = """
        import json, sys
        import numpy as np
        path = sys.argv[1]
        loaded = np.load(path, allow_pickle=False)
        items = loaded.items() if path.endswith(".npz") else [("input", loaded)]
        out = {}
        for name, a in items:
            flat = a.astype(np.float64).ravel()
            out[name] = {"shape": list(a.shape), "dtype": a.dtype.str, "c": bool(a.flags.c_contiguous),
                         "sum": float(flat.sum()), "weighted": float((flat * np.arange(1, flat.size + 1)).sum())}
        print(json.dumps(out))
        """;

    private static List<NpyArray> EveryType()
    {
        long[] shape = [3, 2, 5];
        var rng = new Random(11);
        float[] f = Enumerable.Range(0, 30).Select(i => (float)(rng.NextDouble() * 8 - 4)).ToArray();
        return
        [
            new("f32", ElementType.Float32, shape, f),
            new("f16", ElementType.Float16, shape, f.Select(v => (Half)v).ToArray()),
            new("f64", ElementType.Float64, shape, f.Select(v => v * 1.000001).ToArray()),
            new("i64", ElementType.Int64, shape, Enumerable.Range(0, 30).Select(i => (long)i * 98765432101 - 1_000_000_000_000).ToArray()),
            new("i32", ElementType.Int32, shape, Enumerable.Range(0, 30).Select(i => i * 1000 - 7000).ToArray()),
            new("i8", ElementType.Int8, shape, Enumerable.Range(0, 30).Select(i => (sbyte)(i * 9 - 128)).ToArray()),
            new("u8", ElementType.UInt8, shape, Enumerable.Range(0, 30).Select(i => (byte)(i * 8)).ToArray()),
            new("flags", ElementType.Bool, shape, Enumerable.Range(0, 30).Select(i => i % 4 == 1).ToArray()),
            new("scalar", ElementType.Float32, [], new[] { 1.5f }),
            new("empty", ElementType.Float32, [0, 4], Array.Empty<float>()),
        ];
    }

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public void NumpyReadsOurNpzWithTheSameShapesTypesAndSums(bool compress)
    {
        var arrays = EveryType();
        var path = Path.Combine(Path.GetTempPath(), $"bitbudget-roundtrip-{Guid.NewGuid():N}.npz");
        try
        {
            using (var file = File.Create(path)) NpzWriter.Write(file, arrays, compress);

            var numpy = RunNumpy(path);

            Assert.Equal(arrays.Count, numpy.EnumerateObject().Count());
            foreach (var array in arrays) AssertSame(array, numpy.GetProperty(array.Name));
            // And our own reader gets back what we wrote.
            var back = NpzReader.Read(new MemoryStream(File.ReadAllBytes(path)));
            Assert.Equal(arrays.Select(a => a.Name), back.Select(a => a.Name));
            for (int i = 0; i < arrays.Count; i++)
            {
                Assert.Equal(arrays[i].Shape, back[i].Shape);
                Assert.Equal(ToDoubles(arrays[i].Data), ToDoubles(back[i].Data));
            }
        }
        finally
        {
            File.Delete(path);
        }
    }

    [Fact]
    public void NumpyReadsOurNpy()
    {
        var array = EveryType()[4];
        var path = Path.Combine(Path.GetTempPath(), $"bitbudget-roundtrip-{Guid.NewGuid():N}.npy");
        try
        {
            using (var file = File.Create(path)) NpyWriter.Write(file, array);

            AssertSame(array, RunNumpy(path).GetProperty("input"));
            // NumPy pads the header so the data starts 64-byte aligned; ours must too.
            Assert.Equal(0, (new FileInfo(path).Length - array.ByteCount) % 64);
        }
        finally
        {
            File.Delete(path);
        }
    }

    private static void AssertSame(NpyArray ours, JsonElement theirs)
    {
        var values = ToDoubles(ours.Data);
        double sum = 0, weighted = 0;
        for (int i = 0; i < values.Length; i++)
        {
            sum += values[i];
            weighted += values[i] * (i + 1);
        }
        string dtype = ours.ElementType switch
        {
            ElementType.Float32 => "<f4",
            ElementType.Float16 => "<f2",
            ElementType.Float64 => "<f8",
            ElementType.Int64 => "<i8",
            ElementType.Int32 => "<i4",
            ElementType.Int8 => "|i1",
            ElementType.UInt8 => "|u1",
            ElementType.Bool => "|b1",
            _ => "?",
        };
        Assert.Equal(ours.Shape, theirs.GetProperty("shape").EnumerateArray().Select(e => e.GetInt64()));
        Assert.Equal(dtype, theirs.GetProperty("dtype").GetString());
        Assert.True(theirs.GetProperty("c").GetBoolean());
        Assert.Equal(sum, theirs.GetProperty("sum").GetDouble(), Math.Abs(sum) * 1e-12 + 1e-9);
        Assert.Equal(weighted, theirs.GetProperty("weighted").GetDouble(), Math.Abs(weighted) * 1e-12 + 1e-9);
    }

    private static JsonElement RunNumpy(string path)
    {
        var start = new ProcessStartInfo(Python) { RedirectStandardOutput = true, RedirectStandardError = true };
        start.ArgumentList.Add("-c");
        start.ArgumentList.Add(Summarise);
        start.ArgumentList.Add(path);
        Process process;
        try
        {
            process = Process.Start(start)!;
        }
        catch (System.ComponentModel.Win32Exception e)
        {
            Assert.Fail($"{Python} could not start ({e.Message}); install python3-numpy (apt-get install python3-numpy).");
            throw;
        }
        using (process)
        {
            var stderr = process.StandardError.ReadToEndAsync();
            string stdout = process.StandardOutput.ReadToEnd();
            process.WaitForExit();
            Assert.True(process.ExitCode == 0, $"NumPy failed to read {path} (is python3-numpy installed?): {stderr.Result}");
            return JsonDocument.Parse(stdout).RootElement.Clone();
        }
    }
}
