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
    public void TargetOpsetIsCarriedIntoTheSettings()
    {
        string[] common = ["--model", "m.onnx", "--data", "d.npz", "--budget", "sqnr>=30"];

        Assert.Equal(13, PlanArguments.Parse([.. common, "--target-opset", "13"]).Settings.TargetOpset);
        Assert.Null(PlanArguments.Parse(common).Settings.TargetOpset);
        var error = Assert.Throws<ArgumentException>(() => PlanArguments.Parse([.. common, "--target-opset", "thirteen"]));
        Assert.Contains("'thirteen'", error.Message, StringComparison.Ordinal);
    }
}
