using Bitbudget.Service.Demo;
using Microsoft.ML.OnnxRuntime;
using Onnx;

namespace Bitbudget.Service.Tests.Demo;

[Collection(DemoFolderCollection.Name)]
public sealed class HiveMonitorScenarioTests(DemoFolderFixture demo)
{
    private static readonly string[] FileNames =
    [
        HiveMonitorScenario.ModelFileName,
        HiveMonitorScenario.CalibrationFileName,
        HiveMonitorScenario.HoldoutFileName,
        HiveMonitorScenario.ReadmeFileName,
        HiveMonitorScenario.StreamModelFileName,
        HiveMonitorScenario.StreamCalibrationFileName,
        HiveMonitorScenario.StreamHoldoutFileName,
    ];

    [Fact]
    public void GeneratingTwiceWritesByteIdenticalFiles()
    {
        string second = Path.Combine(Path.GetTempPath(), "bitbudget-demo-" + Guid.NewGuid().ToString("N"));
        try
        {
            HiveMonitorScenario.Generate(second);
            Assert.Equal(FileNames.Order(StringComparer.Ordinal), Directory.GetFiles(second).Select(Path.GetFileName).Order(StringComparer.Ordinal));
            foreach (string name in FileNames)
            {
                byte[] first = File.ReadAllBytes(demo.PathOf(name));
                Assert.True(first.Length > 0, $"{name} is empty");
                Assert.True(first.AsSpan().SequenceEqual(File.ReadAllBytes(Path.Combine(second, name))), $"{name} differs between two runs");
            }
        }
        finally
        {
            Directory.Delete(second, recursive: true);
        }
    }

    [Fact]
    public void ARetrainKeepsTheDataSetsButWritesAnotherModel()
    {
        foreach (string name in new[] { HiveMonitorScenario.CalibrationFileName, HiveMonitorScenario.HoldoutFileName })
        {
            Assert.True(File.ReadAllBytes(demo.PathOf(name)).AsSpan().SequenceEqual(File.ReadAllBytes(demo.RetrainPathOf(name))), $"{name} differs in the retrain");
        }

        Assert.False(File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName)).AsSpan()
            .SequenceEqual(File.ReadAllBytes(demo.RetrainPathOf(HiveMonitorScenario.ModelFileName))), "The retrain wrote the same model bytes.");
    }

    [Fact]
    public void TrainingLowersTheLossAndTheModelIsAccurateButNotPerfect()
    {
        IReadOnlyList<TrainingEpoch> epochs = demo.Result.Epochs;
        Assert.Equal(HiveMonitorScenario.Epochs, epochs.Count);
        Assert.True(epochs[^1].Loss < epochs[0].Loss * 0.6, $"loss went from {epochs[0].Loss} to {epochs[^1].Loss}");

        // The scenario is meant to leave some ambiguous patches: a perfect score would mean the data is too easy.
        Assert.InRange(demo.Result.HoldoutAccuracy, 0.85, 0.99);
    }

    [Fact]
    public void OnnxRuntimeReproducesTheTrainersLogitsAndAccuracyOnTheHoldoutSet()
    {
        // Outside check: ONNX Runtime's Conv, BatchNormalization, Relu, Flatten and Gemm kernels are an
        // independent implementation of the forward pass the C# trainer computes by hand.
        HiveSoundSet holdout = demo.Result.Holdout;
        float[] expected = demo.Result.Network.Predict(holdout.Spectrograms);
        float[] actual = RunOnnxRuntime(File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName)), holdout.Spectrograms, holdout.Count);

        Assert.Equal(expected.Length, actual.Length);
        float worst = 0f;
        for (int i = 0; i < expected.Length; i++)
        {
            worst = Math.Max(worst, Math.Abs(expected[i] - actual[i]));
        }

        Assert.True(worst <= 1e-4f, $"largest logit difference between ONNX Runtime and the trainer is {worst}");

        double ortAccuracy = HiveNet.Accuracy(actual, holdout.Labels);
        double trainerAccuracy = HiveNet.Accuracy(expected, holdout.Labels);
        Assert.Equal(demo.Result.HoldoutAccuracy, trainerAccuracy);
        Assert.True(Math.Abs(ortAccuracy - trainerAccuracy) <= 0.005, $"ONNX Runtime accuracy {ortAccuracy:P2} vs trainer {trainerAccuracy:P2}");
        Assert.True(ortAccuracy >= 0.85, $"ONNX Runtime accuracy on the held-out set is only {ortAccuracy:P2}");
    }

    [Theory]
    [InlineData(1)]
    [InlineData(7)]
    [InlineData(64)]
    public void OnnxRuntimeAcceptsAnyBatchSizeThroughTheSymbolicBatchDimension(int batch)
    {
        // Patches read back from calibration.npz, the file the engine will read, so the file is checked end to end too.
        float[] fromFile = NpyPayload.Float32(demo.PathOf(HiveMonitorScenario.CalibrationFileName), "spectrogram");
        Assert.Equal(demo.Result.Calibration.Spectrograms, fromFile);
        float[] input = fromFile.AsSpan(0, batch * HiveSoundSet.PatchLength).ToArray();
        float[] expected = demo.Result.Network.Predict(input);
        float[] actual = RunOnnxRuntime(File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName)), input, batch);
        Assert.Equal(batch * HiveNet.Classes, actual.Length);
        for (int i = 0; i < expected.Length; i++)
        {
            Assert.True(Math.Abs(expected[i] - actual[i]) <= 1e-4f, $"logit {i}: trainer {expected[i]}, ONNX Runtime {actual[i]}");
        }
    }

    [Fact]
    public void ExportedModelKeepsBatchNormalizationAndNamedInitializersAtOpset21()
    {
        ModelProto model = ModelProto.Parser.ParseFrom(File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName)));
        Assert.Equal(10, model.IrVersion);
        Assert.Equal("bitbudget-demo", model.ProducerName);
        OperatorSetIdProto opset = Assert.Single(model.OpsetImport);
        Assert.Equal(string.Empty, opset.Domain);
        Assert.Equal(21, opset.Version);

        GraphProto graph = model.Graph;
        Assert.Equal(
            ["Conv", "BatchNormalization", "Relu", "Conv", "BatchNormalization", "Relu", "Flatten", "Gemm", "Relu", "Gemm"],
            graph.Node.Select(n => n.OpType));
        Assert.Equal(
            ["conv1", "bn1", "relu1", "conv2", "bn2", "relu2", "flatten", "fc1", "relu3", "fc2"],
            graph.Node.Select(n => n.Name));

        Dictionary<string, long[]> initializers = graph.Initializer.ToDictionary(t => t.Name, t => t.Dims.ToArray());
        Assert.Equal([8L, 1, 3, 3], initializers["conv1.weight"]);
        Assert.Equal([16L, 8, 3, 3], initializers["conv2.weight"]);
        Assert.Equal([32L, 1024], initializers["fc1.weight"]);
        Assert.Equal([4L, 32], initializers["fc2.weight"]);
        foreach (string part in new[] { "scale", "bias", "mean", "var" })
        {
            Assert.Equal([8L], initializers[$"bn1.{part}"]);
            Assert.Equal([16L], initializers[$"bn2.{part}"]);
        }

        // Running statistics, not the identity the layer starts from: training must have moved them.
        float[] bn2Variance = demo.Result.Network.Bn2Variance;
        Assert.Contains(bn2Variance, v => Math.Abs(v - 1f) > 1e-3f);
        Assert.All(bn2Variance, v => Assert.True(v > 0f));

        ValueInfoProto input = Assert.Single(graph.Input);
        Assert.Equal("spectrogram", input.Name);
        Assert.Equal("batch", input.Type.TensorType.Shape.Dim[0].DimParam);
        Assert.Equal([1L, 16, 16], input.Type.TensorType.Shape.Dim.Skip(1).Select(d => d.DimValue));
        ValueInfoProto output = Assert.Single(graph.Output);
        Assert.Equal("logits", output.Name);
        Assert.Equal("batch", output.Type.TensorType.Shape.Dim[0].DimParam);
        Assert.Equal(4, output.Type.TensorType.Shape.Dim[1].DimValue);
    }

    [Fact]
    public void ReadmeNamesTheFourClassesAndTheMeasuredAccuracy()
    {
        string readme = File.ReadAllText(demo.PathOf(HiveMonitorScenario.ReadmeFileName));
        foreach (string name in HiveSoundSynthesizer.ClassNames)
        {
            Assert.Contains(name, readme, StringComparison.Ordinal);
        }

        Assert.Contains((demo.Result.HoldoutAccuracy * 100).ToString("F1", System.Globalization.CultureInfo.InvariantCulture) + "%", readme, StringComparison.Ordinal);
    }

    private static float[] RunOnnxRuntime(byte[] model, float[] spectrograms, int count)
    {
        using var options = new SessionOptions { IntraOpNumThreads = 1 };
        using var session = new InferenceSession(model, options);
        using OrtValue input = OrtValue.CreateTensorValueFromMemory(spectrograms, [count, 1, HiveSoundSet.Bands, HiveSoundSet.Frames]);
        using var runOptions = new RunOptions();
        using IDisposableReadOnlyCollection<OrtValue> outputs = session.Run(runOptions, ["spectrogram"], [input], ["logits"]);
        return outputs[0].GetTensorDataAsSpan<float>().ToArray();
    }
}
