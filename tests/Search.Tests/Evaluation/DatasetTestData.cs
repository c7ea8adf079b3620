using Bitbudget.Search.Evaluation;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>Paths of the NumPy-written fixtures and the formulas make_fixtures.py used for them.</summary>
internal static class DatasetTestData
{
    public static readonly long[] FixtureShape = [2, 3, 4];

    public static string Fixture(string name) => Path.Combine(AppContext.BaseDirectory, "Fixtures", "numpy", name);

    public static NpyArray ReadFixture(string name, DatasetLimits? limits = null)
    {
        using var stream = File.OpenRead(Fixture(name));
        return NpyReader.Read(stream, Path.GetFileNameWithoutExtension(name), limits);
    }

    /// <summary>Mirrors values(kind) in make_fixtures.py: element i of the C-order (2, 3, 4) array.</summary>
    public static double Expected(string kind, long i) => kind switch
    {
        "f" => i * 0.25 - 3,
        "i8" => i * 123456789013L - 1500000000000L,
        "i" => i * 7 - 20,
        "i1" => i * 11 % 256 - 128,
        "u1" => i * 11 % 256,
        "b1" => i % 3 == 0 ? 1 : 0,
        _ => throw new ArgumentOutOfRangeException(nameof(kind)),
    };

    // Exact runtime types: a byte[] also matches the pattern sbyte[] (CLR array variance).
    public static double[] ToDoubles(Array data) => data.GetType() == typeof(sbyte[])
        ? Array.ConvertAll((sbyte[])data, v => (double)v)
        : data switch
    {
        float[] a => Array.ConvertAll(a, v => (double)v),
        Half[] a => Array.ConvertAll(a, v => (double)v),
        double[] a => a,
        long[] a => Array.ConvertAll(a, v => (double)v),
        int[] a => Array.ConvertAll(a, v => (double)v),
        byte[] a => Array.ConvertAll(a, v => (double)v),
        bool[] a => Array.ConvertAll(a, v => v ? 1.0 : 0.0),
        _ => throw new ArgumentException(data.GetType().Name),
    };

    public static NpyArray Floats(string name, long[] shape, Func<long, float> value)
    {
        long n = shape.Aggregate(1L, (a, d) => a * d);
        var data = new float[n];
        for (long i = 0; i < n; i++) data[i] = value(i);
        return new NpyArray(name, ElementType.Float32, shape, data);
    }

    public static byte[] NpyBytes(NpyArray array)
    {
        using var stream = new MemoryStream();
        NpyWriter.Write(stream, array);
        return stream.ToArray();
    }

    public static byte[] NpzBytes(IReadOnlyList<NpyArray> arrays, bool compress = true)
    {
        using var stream = new MemoryStream();
        NpzWriter.Write(stream, arrays, compress);
        return stream.ToArray();
    }

    public static EngineException Refused(Action action, string code)
    {
        var e = Assert.Throws<EngineException>(action);
        Assert.Equal(code, e.Code);
        return e;
    }
}
