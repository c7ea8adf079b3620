using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Search.Tests.Support;

/// <summary>
/// The streaming model of <see cref="SmallModels.StreamingBytes"/> with its NumPy-written datasets
/// (tests/Search.Tests/Fixtures/make_fixtures.py: frame [n,8], state [2,n,6], a 0-d int64 rate), and an
/// ONNX Runtime run of any version of it on a whole dataset in one batch, the reference the tests hold
/// the engine's batched runs against.
/// </summary>
internal static class StreamingData
{
    public static OnnxModel Model() => OnnxModel.Load(SmallModels.StreamingBytes(), "streaming");

    public static IReadOnlyList<NpyArray> Arrays(string file = "streaming.npz") =>
        DatasetReader.Read(File.ReadAllBytes(Path.Combine(AppContext.BaseDirectory, "Fixtures", "numpy", file)));

    public static CalibrationSet Set(OnnxModel model, string file = "streaming.npz") => CalibrationSet.Create(Arrays(file), model.Inputs);

    /// <summary>Every output of <paramref name="model"/> (bytes) on the dataset, in one ONNX Runtime run of the graph as written.</summary>
    public static Dictionary<string, float[]> RunInOrt(byte[] model, string file = "streaming.npz")
    {
        var arrays = Arrays(file).ToDictionary(a => a.Name);
        var feeds = new Dictionary<string, Func<OrtValue>>(StringComparer.Ordinal)
        {
            ["frame"] = OrtRunner.Floats((float[])arrays["frame"].Data, arrays["frame"].Shape.ToArray()),
            ["state"] = OrtRunner.Floats((float[])arrays["state"].Data, arrays["state"].Shape.ToArray()),
            ["rate"] = OrtRunner.Int64(((long[])arrays["rate"].Data)[0]),
        };
        // As written: with its default optimisations ONNX Runtime fuses DequantizeLinear+MatMul and quantizes
        // that MatMul's activations too (README, "ONNX Runtime and MatMul"), which is not the weights-only model measured.
        return OrtRunner.Run(model, feeds);
    }

    /// <summary>SQNR in dB, 10 log10(sum r^2 / sum (r - t)^2), summed in double: the textbook formula, written out here independently of the engine.</summary>
    public static double Sqnr(float[] reference, float[] trial)
    {
        double signal = 0, noise = 0;
        for (var i = 0; i < reference.Length; i++)
        {
            signal += (double)reference[i] * reference[i];
            var d = (double)reference[i] - trial[i];
            noise += d * d;
        }

        return noise == 0 ? double.PositiveInfinity : 10 * Math.Log10(signal / noise);
    }
}
