using System.Text.Json;
using Bitbudget.Search.Evaluation;
using Bitbudget.Service.Demo;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Service.Tests.Commands;

/// <summary>
/// <c>plan</c> on the demo's streaming detector, fed as README's worked example: state on axis 1, a 0-d
/// sample rate, the budget judged on the swarm probability only, and a held-out set. Outside check:
/// ONNX Runtime runs the written model and the FP32 model on the streaming sets, and the probability's
/// SQNR, computed here from scratch, must equal the manifest's and meet the budget.
/// </summary>
[Collection(ConsoleCollection.Name)]
public sealed class PlanStreamTests(PlanDemoFixture fixture) : IClassFixture<PlanDemoFixture>
{
    [Fact]
    public async Task PlanJudgesTheProbabilityAndShowsHeldOutFiguresBesideCalibrationOnes()
    {
        var output = System.IO.Path.Combine(fixture.Folder, "stream-plan");
        var run = await CommandRun.RunAsync(
            "plan", "--model", Path(HiveMonitorScenario.StreamModelFileName), "--data", Path(HiveMonitorScenario.StreamCalibrationFileName),
            "--holdout", Path(HiveMonitorScenario.StreamHoldoutFileName), "--outputs", HiveStreamExporter.ProbabilityName,
            "--budget", "sqnr>=30", "--bits", "2,4,8", "--out", output);

        Assert.True(run.ExitCode == 0, run.ToString());
        Assert.Contains("worst judged output: 'swarm_probability'", run.Out, StringComparison.Ordinal);
        Assert.Contains($"held-out ({HiveMonitorScenario.StreamHoldoutPatches} samples)", run.Out, StringComparison.Ordinal);

        using var manifest = JsonDocument.Parse(File.ReadAllBytes(System.IO.Path.Combine(output, "manifest.json")));
        var root = manifest.RootElement;
        var axes = root.GetProperty("dataset").GetProperty("sampleAxes");
        Assert.Equal(1, axes.GetProperty("state").GetInt32());
        Assert.Equal(JsonValueKind.Null, axes.GetProperty("sample_rate").ValueKind);
        Assert.Equal(1, root.GetProperty("dataset").GetProperty("outputSampleAxes").GetProperty("next_state").GetInt32());
        var held = root.GetProperty("heldOut");
        Assert.Equal(HiveMonitorScenario.StreamHoldoutPatches, held.GetProperty("samples").GetInt32());

        var quantized = File.ReadAllBytes(System.IO.Path.Combine(output, "model.quantized.onnx"));
        var claimed = root.GetProperty("totals").GetProperty("metrics").GetProperty("outputs").EnumerateArray()
            .Single(o => o.GetProperty("name").GetString() == HiveStreamExporter.ProbabilityName).GetProperty("sqnrDb").GetDouble();
        var measured = ProbabilitySqnr(quantized, HiveMonitorScenario.StreamCalibrationFileName);
        Assert.True(measured >= 30, $"ONNX Runtime measures {measured:0.00} dB");
        Assert.Equal(measured, claimed, 2);
        Assert.Equal(ProbabilitySqnr(quantized, HiveMonitorScenario.StreamHoldoutFileName), held.GetProperty("measured").GetDouble(), 2);
    }

    private string Path(string name) => System.IO.Path.Combine(fixture.Folder, name);

    /// <summary>SQNR of the swarm probability, quantized against FP32, both run in ONNX Runtime as written (no graph fusions).</summary>
    private double ProbabilitySqnr(byte[] quantized, string dataFile)
    {
        var arrays = DatasetReader.Read(File.ReadAllBytes(Path(dataFile))).ToDictionary(a => a.Name);
        float[] Run(byte[] model)
        {
            using var options = new SessionOptions { GraphOptimizationLevel = GraphOptimizationLevel.ORT_DISABLE_ALL };
            using var session = new InferenceSession(model, options);
            using var frame = OrtValue.CreateTensorValueFromMemory((float[])arrays["frame"].Data, arrays["frame"].Shape.ToArray());
            using var state = OrtValue.CreateTensorValueFromMemory((float[])arrays["state"].Data, arrays["state"].Shape.ToArray());
            using var rate = OrtValue.CreateTensorValueFromMemory((long[])arrays["sample_rate"].Data, []);
            using var runOptions = new RunOptions();
            using var results = session.Run(runOptions, ["frame", "state", "sample_rate"], [frame, state, rate], [HiveStreamExporter.ProbabilityName]);
            return results[0].GetTensorDataAsSpan<float>().ToArray();
        }

        var reference = Run(File.ReadAllBytes(Path(HiveMonitorScenario.StreamModelFileName)));
        var trial = Run(quantized);
        double signal = 0, noise = 0;
        for (var i = 0; i < reference.Length; i++)
        {
            signal += (double)reference[i] * reference[i];
            noise += ((double)reference[i] - trial[i]) * ((double)reference[i] - trial[i]);
        }

        return 10 * Math.Log10(signal / noise);
    }
}
