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
}
