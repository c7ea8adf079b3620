using Bitbudget.Service.Commands;

namespace Bitbudget.Service.Tests.Commands;

public sealed class PlanArgumentsTests
{
    [Fact]
    public void ActivationsFlagTurnsActivationQuantizationOn()
    {
        string[] common = ["--model", "m.onnx", "--data", "d.npz", "--budget", "sqnr>=30"];

        Assert.True(PlanArguments.Parse([.. common, "--activations"]).Settings.QuantizeActivations);
        Assert.False(PlanArguments.Parse(common).Settings.QuantizeActivations);
    }

    [Fact]
    public void RoundingListReachesTheSettingsAndAnUnknownOneIsRefused()
    {
        string[] common = ["--model", "m.onnx", "--data", "d.npz", "--budget", "sqnr>=30"];

        Assert.Equal(
            [Search.Quantization.RoundingMethod.Compensated, Search.Quantization.RoundingMethod.Nearest],
            PlanArguments.Parse([.. common, "--rounding", "Compensated,nearest"]).Settings.Rounding);
        Assert.Equal([Search.Quantization.RoundingMethod.Compensated], Search.Planning.RoundingChoices.Asked(PlanArguments.Parse(common).Settings));
        var error = Assert.Throws<ArgumentException>(() => PlanArguments.Parse([.. common, "--rounding", "stochastic"]));
        Assert.Contains("nearest, compensated", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void PairsReachTheSettingsAndACountOutOfRangeIsRefused()
    {
        string[] common = ["--model", "m.onnx", "--data", "d.npz", "--budget", "sqnr>=30"];

        Assert.Equal(12, PlanArguments.Parse([.. common, "--pairs", "12"]).Settings.Pairs);
        Assert.Equal(0, PlanArguments.Parse([.. common, "--pairs", "0"]).Settings.Pairs);
        Assert.Equal(Search.Planning.SearchSettings.DefaultPairs, PlanArguments.Parse(common).Settings.Pairs);
        foreach (var bad in new[] { "65", "-1", "many" })
        {
            var error = Assert.Throws<ArgumentException>(() => PlanArguments.Parse([.. common, "--pairs", bad]));
            Assert.Contains($"'{bad}'", error.Message, StringComparison.Ordinal);
        }
    }

    [Fact]
    public void BiasCorrectionIsAFlagThatAlsoTakesTrueOrFalseAndRefusesAnythingElse()
    {
        string[] common = ["--model", "m.onnx", "--data", "d.npz", "--budget", "sqnr>=30"];

        Assert.True(PlanArguments.Parse([.. common, "--bias-correction"]).Settings.BiasCorrection);
        Assert.True(PlanArguments.Parse([.. common, "--bias-correction", "True"]).Settings.BiasCorrection);
        Assert.False(PlanArguments.Parse([.. common, "--bias-correction", "false"]).Settings.BiasCorrection);
        Assert.Equal(Search.Planning.SearchSettings.DefaultBiasCorrection, PlanArguments.Parse(common).Settings.BiasCorrection);
        var error = Assert.Throws<ArgumentException>(() => PlanArguments.Parse([.. common, "--bias-correction", "maybe"]));
        Assert.Contains("maybe", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void TargetOpsetIsCarriedIntoTheSettings()
    {
        string[] common = ["--model", "m.onnx", "--data", "d.npz", "--budget", "sqnr>=30"];

        Assert.Equal(13, PlanArguments.Parse([.. common, "--target-opset", "13"]).Settings.TargetOpset);
        Assert.Null(PlanArguments.Parse(common).Settings.TargetOpset);
        var error = Assert.Throws<ArgumentException>(() => PlanArguments.Parse([.. common, "--target-opset", "thirteen"]));
        Assert.Contains("'thirteen'", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void FeedingAndJudgingOptionsReachTheSettings()
    {
        var parsed = PlanArguments.Parse([
            "--model", "m.onnx", "--data", "d.npz", "--budget", "sqnr>=30", "--sample-axis", "state=1", "--sample-axis", "frames=0",
            "--outputs", "probability, next_state", "--metric-space", "logit", "--holdout", "h.npz"]);

        Assert.Equal(new Dictionary<string, int> { ["state"] = 1, ["frames"] = 0 }, parsed.Settings.SampleAxes);
        Assert.Equal(["probability", "next_state"], parsed.Settings.Outputs);
        Assert.Equal(Search.Evaluation.MetricSpace.Logit, parsed.Settings.MetricSpace);
        Assert.Equal("h.npz", parsed.Holdout);
    }

    [Theory]
    [InlineData("--sample-axis", "state", "INPUT=AXIS")]
    [InlineData("--sample-axis", "state=-1", "non-negative")]
    [InlineData("--outputs", ",", "comma-separated list of output names")]
    [InlineData("--metric-space", "decibel", "linear, logit")]
    public void MalformedFeedingOptionsSayWhatToWrite(string option, string value, string said)
    {
        var e = Assert.Throws<ArgumentException>(() => PlanArguments.Parse(["--model", "m.onnx", "--data", "d.npz", "--budget", "sqnr>=30", option, value]));

        Assert.Contains(said, e.Message, StringComparison.Ordinal);
    }
}
