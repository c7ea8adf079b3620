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
    public void CompensatedRoundingLeavesTheCacheLessByWhatTheRounderHolds()
    {
        // x [n, 8, 512] through two 512x512 MatMuls: each layer's inputs have 512 columns in one group, so compensated
        // rounding keeps Σx (512 doubles) and Σxxᵀ (512² doubles) per layer, and a 512² double Cholesky factor per layer
        // once computed, plus one 512² matrix for the factoring under way.
        const int Columns = 512;
        var graph = new GraphBuilder().Input("x", -1, 8, Columns)
            .Initializer("w1", [Columns, Columns], GraphBuilder.RandomValues(1, Columns * Columns, 0.05f))
            .Node("MatMul", ["x", "w1"], ["m1"], "fc1")
            .Node("Relu", ["m1"], ["h1"], "relu1")
            .Initializer("w2", [Columns, Columns], GraphBuilder.RandomValues(2, Columns * Columns, 0.05f))
            .Node("MatMul", ["h1", "w2"], ["m2"], "fc2");
        var model = OnnxModel.Load(graph.Output("m2", -1, 8, Columns).ToBytes(), "square-pair");
        const int SampleCount = 16;
        var data = CalibrationSet.Create([new NpyArray("x", ElementType.Float32, [SampleCount, 8, Columns], GraphBuilder.RandomValues(3, SampleCount * 8 * Columns))], model.Inputs);

        var nearest = new WeightRounder(model, new Dictionary<string, LayerInputs>(StringComparer.Ordinal));
        var compensated = WeightRounder.Gather(model, data, model.Layers, secondMoments: true, correctBiases: true, maxBatch: 32, maxBytes: 512L << 20);

        // Sizes from the definitions of Σx and Σxxᵀ in double (8 bytes), not from the code under test.
        const long Matrix = (long)Columns * Columns * sizeof(double);
        const long Moments = 2 * (Matrix + (Columns * sizeof(double)));
        Assert.Equal(Moments, LayerInputCollector.MomentBytes(model, model.Layers, 512L << 20));
        Assert.Equal(Moments + (2 * Matrix) + Matrix, compensated.HeldBytes);
        Assert.Equal(0, nearest.HeldBytes);

        // The plan, on shapes of a one-sample probe (16 KiB a tensor), under the same 64 MiB setting.
        var shapes = new[] { "m1", "h1", "m2" }.ToDictionary(n => n, _ => new long[] { 1, 8, Columns }, StringComparer.Ordinal);
        var parameters = model.Layers.Sum(l => l.ParameterCount);
        SweepMemory.Choice Plan(WeightRounder rounder) =>
            SweepMemory.Plan(data, new TrialSessionOptions(Rounder: rounder, MaxSweepMemoryBytes: 64L << 20), shapes, 1, model.Proto, parameters);
        var withNearest = Plan(nearest);
        var withCompensated = Plan(compensated);

        Assert.Equal(SampleCount, withNearest.SamplesPerRun);
        Assert.Equal(SampleCount, withCompensated.SamplesPerRun);
        Assert.Equal(compensated.HeldBytes, withNearest.RunAndCacheBytes - withCompensated.RunAndCacheBytes);
        Assert.Equal(compensated.HeldBytes, withNearest.CacheBudgetBytes - withCompensated.CacheBudgetBytes);
        Assert.DoesNotContain("rounding factors", withNearest.Reason, StringComparison.Ordinal);
        Assert.Contains("and 10 MiB of layer input moments and rounding factors", withCompensated.Reason, StringComparison.Ordinal);

        // The session passes its rounder to the plan: the sweep note names the rounder's part.
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(Rounder: compensated, MaxSweepMemoryBytes: 64L << 20));
        session.PrepareSweep(model.Layers.ToDictionary(l => l.Name, _ => 6));
        Assert.Contains("MiB of layer input moments and rounding factors", session.SweepNote, StringComparison.Ordinal);
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
