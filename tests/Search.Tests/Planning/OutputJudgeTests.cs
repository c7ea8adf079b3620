using System.Text.Json.Nodes;
using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Manifest;
using Bitbudget.Search.Planning;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Planning;

/// <summary>
/// Budgets judged per output on the two-output streaming model, whose next state carries thousands of
/// times the probability's power. Outside reference: ONNX Runtime running the exported QDQ model and the
/// FP32 model on the NumPy-written dataset, with SQNR written out by hand (<see cref="StreamingData.Sqnr"/>).
/// </summary>
public sealed class OutputJudgeTests
{
    // Packed counting, so the widths below 8 bits save bytes and the judged output decides how low each layer goes.
    private static readonly int[] Bits = [2, 3, 4, 6, 8];

    [Fact]
    public void BudgetOnTheWeakOutputHoldsWhenReMeasuredInOnnxRuntime()
    {
        var model = StreamingData.Model();
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), Bits, Outputs: ["probability"], Storage: StorageRule.Packed);

        var result = SearchRunner.Run(model, StreamingData.Set(model), settings, new InMemoryTrialStore(), null, CancellationToken.None);

        Assert.True(result.Feasible, result.Message);
        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        var ort = OrtSqnr(result.QuantizedModel!);
        Assert.True(ort["probability"] >= 30, $"ONNX Runtime measures the probability at {ort["probability"]:0.00} dB");
        var reported = manifest.Totals!.Metrics.Outputs!.Single(o => o.Name == "probability");
        Assert.True(reported.Judged);
        Assert.False(manifest.Totals.Metrics.Outputs!.Single(o => o.Name == "next_state").Judged);
        Assert.Equal(ort["probability"], reported.SqnrDb!.Value, 2);
        Assert.Equal(result.MeasuredError, reported.SqnrDb!.Value, 12);
        Assert.Equal("probability", manifest.Totals.BindingOutput);
    }

    [Fact]
    public void JudgingOnlyTheStateLeavesTheProbabilityBelowTheBudgetItWouldNeed()
    {
        var model = StreamingData.Model();
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), Bits, Outputs: ["next_state"], Storage: StorageRule.Packed);

        var result = SearchRunner.Run(model, StreamingData.Set(model), settings, new InMemoryTrialStore(), null, CancellationToken.None);

        // The head feeds only the probability, so a budget that looks at the state alone gives it the fewest bits.
        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        Assert.Equal(2, manifest.Layers.Single(l => l.Name == "head").Bits);
        var ort = OrtSqnr(result.QuantizedModel!);
        Assert.True(ort["next_state"] >= 30);
        Assert.True(ort["probability"] < 30, $"probability {ort["probability"]:0.0} dB");
    }

    [Fact]
    public void EveryOutputIsJudgedByDefaultAndTheWorstOneDecides()
    {
        var judge = new OutputJudge(BudgetMetric.Sqnr, null);
        var measured = new MetricSet(1e-4, 40, 1, 0, 1, null, Outputs: [new OutputMetrics("p", 1e-2, 20, 1, 0, 1), new OutputMetrics("s", 1e-5, 50, 1, 0, 1)]);
        var reference = new MetricSet(0, double.PositiveInfinity, 1, 0, 1, null);

        Assert.Equal(20, judge.Value(measured, reference));
        Assert.Equal("p", judge.Binding(measured)!.Name);
        Assert.False(judge.Meets(30, measured, reference));
        Assert.Equal(1e-2, judge.ToAdditive(measured, reference), 12);
        Assert.Equal(50, new OutputJudge(BudgetMetric.Sqnr, ["s"]).Value(measured, reference));

        // Upper-bound metrics take the largest value; stored trials without per-output values fall back to the pooled one.
        Assert.Equal(1e-2, new OutputJudge(BudgetMetric.RelativeMse, null).Value(measured, reference));
        Assert.Equal(40, judge.Value(measured with { Outputs = null }, reference));
    }

    [Fact]
    public void HeldOutFiguresStandBesideTheCalibrationFiguresAndMatchOnnxRuntime()
    {
        var model = StreamingData.Model();
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), Bits, Storage: StorageRule.Packed);
        var holdout = StreamingData.Set(model, "streaming_holdout.npz");

        var result = SearchRunner.Run(model, StreamingData.Set(model), settings, new InMemoryTrialStore(), null, CancellationToken.None, holdout: holdout);

        Assert.True(result.Feasible, result.Message);
        var manifest = ManifestJson.Deserialize(result.ManifestJson);
        var held = manifest.HeldOut!;
        Assert.Equal(24, held.Samples);
        Assert.Equal(24, result.HeldOutSamples);
        var ort = OrtSqnr(result.QuantizedModel!, "streaming_holdout.npz");
        var worst = Math.Min(ort["probability"], ort["next_state"]);
        Assert.Equal(worst, held.Measured!.Value, 2);
        Assert.Equal(worst, result.HeldOutMeasured!.Value, 2);
        Assert.Equal(worst >= 30, held.MeetsBudget);
        Assert.Equal(worst >= 30, result.HeldOutMeetsBudget);
        Assert.Equal(worst < 30, (result.Warnings ?? []).Any(w => w.StartsWith("Held-out check:", StringComparison.Ordinal)));
    }

    [Fact]
    public void HeldOutMissIsWarnedWithBothFigures()
    {
        var model = StreamingData.Model();
        var settings = new SearchSettings(new ErrorBudget(BudgetMetric.Sqnr, 30), Bits, Storage: StorageRule.Packed);
        var calibration = StreamingData.Set(model);
        // The held-out set is the calibration set with the state 30 times larger: the recurrent path
        // then dominates and a width chosen for the quiet calibration state no longer holds.
        var loud = StreamingData.Arrays().Select(a => a.Name == "state" ? a with { Data = ((float[])a.Data).Select(v => v * 30).ToArray() } : a).ToList();

        var result = SearchRunner.Run(model, calibration, settings, new InMemoryTrialStore(), null, CancellationToken.None, holdout: CalibrationSet.Create(loud, model.Inputs));

        Assert.True(result.Feasible, result.Message);
        Assert.False(result.HeldOutMeetsBudget);
        var warning = Assert.Single(result.Warnings!, w => w.StartsWith("Held-out check:", StringComparison.Ordinal));
        Assert.Contains("on the 40 held-out samples", warning);
        Assert.Contains("missing the budget of 30.0 dB SQNR", warning);
        var manifest = JsonNode.Parse(result.ManifestJson)!;
        Assert.False((bool)manifest["heldOut"]!["meetsBudget"]!);
        Assert.Contains(manifest["warnings"]!.AsArray(), w => ((string)w!).StartsWith("Held-out check:", StringComparison.Ordinal));
    }

    /// <summary>Per-output SQNR of an exported model against the FP32 model, both run in ONNX Runtime.</summary>
    private static Dictionary<string, double> OrtSqnr(byte[] quantized, string file = "streaming.npz")
    {
        var fp32 = StreamingData.RunInOrt(SmallModels.StreamingBytes(), file);
        var q = StreamingData.RunInOrt(quantized, file);
        return fp32.Keys.ToDictionary(k => k, k => StreamingData.Sqnr(fp32[k], q[k]));
    }
}
