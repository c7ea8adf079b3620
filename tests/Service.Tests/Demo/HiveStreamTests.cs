using System.Text.Json;
using Bitbudget.Search.Evaluation;
using Bitbudget.Service.Demo;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Service.Tests.Demo;

/// <summary>
/// The demo's streaming detector. Outside checks: ONNX Runtime runs the written model and must compute
/// what <see cref="HiveStream.Step"/> computes; NumPy (numpy.load) reads the streaming sets with the
/// sample rate as a 0-d array.
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class HiveStreamTests(DemoFolderFixture demo)
{
    [Fact]
    public void OnnxRuntimeComputesTheStepTheDatasetWasBuiltWith()
    {
        var arrays = DatasetReader.Read(File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.StreamCalibrationFileName))).ToDictionary(a => a.Name);
        var frames = (float[])arrays[HiveStreamExporter.FrameName].Data;
        var state = (float[])arrays[HiveStreamExporter.StateName].Data;
        int n = HiveMonitorScenario.StreamCalibrationCount;

        using var session = new InferenceSession(File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.StreamModelFileName)));
        using var frameValue = OrtValue.CreateTensorValueFromMemory(frames, [n, HiveStream.Bands]);
        using var stateValue = OrtValue.CreateTensorValueFromMemory(state, [2, n, HiveStream.Units]);
        using var rateValue = OrtValue.CreateTensorValueFromMemory(new[] { HiveStream.SampleRate }, []);
        using var runOptions = new RunOptions();
        using var results = session.Run(
            runOptions,
            [HiveStreamExporter.FrameName, HiveStreamExporter.StateName, HiveStreamExporter.SampleRateName],
            [frameValue, stateValue, rateValue],
            [HiveStreamExporter.ProbabilityName, HiveStreamExporter.NextStateName]);
        var probability = results[0].GetTensorDataAsSpan<float>().ToArray();
        var next = results[1].GetTensorDataAsSpan<float>().ToArray();

        var stream = demo.Result.Stream;
        for (int s = 0; s < n; s++)
        {
            var (fast, slow) = stream.Step(
                frames.AsSpan(s * HiveStream.Bands, HiveStream.Bands),
                state.AsSpan(s * HiveStream.Units, HiveStream.Units),
                state.AsSpan((n + s) * HiveStream.Units, HiveStream.Units),
                HiveStream.SampleRate);
            for (int u = 0; u < HiveStream.Units; u++)
            {
                // Float sums in another order (ONNX Runtime's MatMul): agreement to a few float ulps, not bit for bit.
                Assert.True(Math.Abs(fast[u] - next[(s * HiveStream.Units) + u]) <= 1e-5f, $"sample {s} fast unit {u}");
                Assert.True(Math.Abs(slow[u] - next[((n + s) * HiveStream.Units) + u]) <= 1e-5f, $"sample {s} slow unit {u}");
            }
        }

        Assert.All(probability, p => Assert.InRange(p, 0f, 1f));
        Assert.True(probability.Max() - probability.Min() > 0.2f, "the detector's probability should vary across the calibration set");
    }

    [Fact]
    public void NumPyReadsTheStreamingSetsWithAZeroDimensionalSampleRate()
    {
        const string Script = """
            import json, sys
            import numpy as np
            d = np.load(sys.argv[1])
            print(json.dumps({k: {"dtype": d[k].dtype.str, "shape": list(d[k].shape), "first": float(d[k].flat[0])} for k in d.files}))
            """;
        using var described = JsonDocument.Parse(NumPyProcess.Run(Script, demo.PathOf(HiveMonitorScenario.StreamCalibrationFileName)));
        var root = described.RootElement;
        int n = HiveMonitorScenario.StreamCalibrationCount;

        Assert.Equal([n, 16], root.GetProperty("frame").GetProperty("shape").EnumerateArray().Select(e => e.GetInt32()));
        Assert.Equal([2, n, 12], root.GetProperty("state").GetProperty("shape").EnumerateArray().Select(e => e.GetInt32()));
        Assert.Equal("<f4", root.GetProperty("state").GetProperty("dtype").GetString());
        var rate = root.GetProperty("sample_rate");
        Assert.Equal("<i8", rate.GetProperty("dtype").GetString());
        Assert.Equal(0, rate.GetProperty("shape").GetArrayLength());
        Assert.Equal(16000, rate.GetProperty("first").GetDouble());
    }
}
