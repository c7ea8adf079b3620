using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// MaxSweepMemoryBytes bounds what a sweep holds, on a graph built here whose activations (not its weights) are what
/// grows with the calibration set: a lower setting gives fewer samples per run and fewer cached bytes, with the same
/// sensitivities to rounding; the dead outputs of finished trials are counted and collected past their allowance.
/// Memory itself is measured in the benchmark only (tests/Benchmarks --sweep ... --trials N).
/// </summary>
public sealed class SweepMemoryTests
{
    private const int Samples = 64;

    // x [n, 512, 64] through six 64x64 MatMuls with Relu between: 128 KiB per sample per tensor, 12 tensors per sample
    // (1.5 MiB), while the weights are 16 KiB each; outputs 128 KiB per sample (8 MiB for 64 samples).
    private static OnnxModel WideChain()
    {
        var graph = new GraphBuilder().Input("x", -1, 512, 64);
        var input = "x";
        for (var i = 1; i <= 6; i++)
        {
            graph.Initializer($"w{i}", [64, 64], GraphBuilder.RandomValues(i, 64 * 64, 0.25f))
                .Node("MatMul", [input, $"w{i}"], [$"m{i}"], $"fc{i}");
            input = $"m{i}";
            if (i < 6)
            {
                graph.Node("Relu", [input], [$"h{i}"], $"relu{i}");
                input = $"h{i}";
            }
        }

        return OnnxModel.Load(graph.Output(input, -1, 512, 64).ToBytes(), "wide-chain");
    }

    private static CalibrationSet Data(OnnxModel model) =>
        CalibrationSet.Create([new NpyArray("x", ElementType.Float32, [Samples, 512, 64], GraphBuilder.RandomValues(7, Samples * 512 * 64))], model.Inputs);

    [Fact]
    public void ALowerSettingRunsFewerSamplesAtOnceAndCachesFewerBytesWithTheSameSensitivities()
    {
        var model = WideChain();
        var data = Data(model);
        var trials = model.Layers.ToDictionary(l => l.Name, _ => 6);
        using var roomy = TrialSession.Open(model, data, new TrialSessionOptions(MaxSweepMemoryBytes: 256L << 20));
        using var tight = TrialSession.Open(model, data, new TrialSessionOptions(MaxSweepMemoryBytes: 80L << 20));
        roomy.PrepareSweep(trials);
        tight.PrepareSweep(trials);

        // 256 MiB leaves room for the most samples per run (MaxBatch 32); 80 MiB, less the data, outputs and dead outputs
        // (56 MiB), leaves 24 MiB, half of it for a run of 1.5 MiB per sample.
        Assert.Equal(32, roomy.SamplesPerRun);
        Assert.Equal(8, tight.SamplesPerRun);
        Assert.Contains($"8 of {Samples} samples per run", tight.SweepNote, StringComparison.Ordinal);
        Assert.Contains("including 16 MiB of finished trials' outputs awaiting the garbage collector", tight.SweepNote, StringComparison.Ordinal);
        Assert.True(roomy.CachedActivationBytes > 0, roomy.SweepNote);
        Assert.True(tight.CachedActivationBytes < roomy.CachedActivationBytes, $"{tight.SweepNote} / {roomy.SweepNote}");
        Assert.True(tight.CachedActivationBytes <= 12L << 20, tight.SweepNote);

        foreach (var layer in model.Layers)
        {
            var setting = new LayerSetting(3);
            Assert.Equal(roomy.MeasureLayer(layer, setting, 6).SqnrDb, tight.MeasureLayer(layer, setting, 6).SqnrDb, 3);
        }
    }

    [Fact]
    public void DeadOutputsAreCollectedOncePastTheirAllowance()
    {
        var reference = new List<OutputTensor> { new("y", new float[1000], [1000]) };
        var dead = new DeadOutputs(allowanceBytes: 20_000);

        // A trial whose output is the reference's own array (made before its cut) leaves nothing dead.
        dead.Add(reference, reference);
        Assert.Equal(0, dead.Collections);

        // Each trial's own output counts twice (each run's part and the whole): 8,000 bytes a trial.
        dead.Add([new("y", new float[1000], [1000])], reference);
        dead.Add([new("y", new float[1000], [1000])], reference);
        Assert.Equal(0, dead.Collections);
        dead.Add([new("y", new float[1000], [1000])], reference);
        Assert.Equal(1, dead.Collections);
        dead.Add([new("y", new float[1000], [1000])], reference);
        Assert.Equal(1, dead.Collections);
    }
}
