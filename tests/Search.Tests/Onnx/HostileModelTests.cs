using Bitbudget.Search.Onnx;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Onnx;

/// <summary>
/// Every model of <see cref="HostileModels"/> is refused with its own code and a message naming the node or
/// tensor at fault: by the engine's load when its own checks can tell, otherwise by the build in ONNX Runtime
/// (the runtime is the outside reference for what is loadable). Loads run under a deadline so a walk that
/// never ends fails the test instead of hanging the run.
/// </summary>
public sealed class HostileModelTests
{
    public static TheoryData<string> Names => new(HostileModels.All.Select(m => m.Name));

    [Theory]
    [MemberData(nameof(Names))]
    public void HostileModelIsRefusedNamingWhatIsWrong(string name)
    {
        var model = HostileModels.All.Single(m => m.Name == name);
        var refusal = Refusal(() =>
        {
            OnnxModel.Load(model.Bytes, "hostile");
            RuntimeModelCheck.Check(model.Bytes, TimeSpan.FromSeconds(20));
        });

        Assert.Equal(model.Code, refusal.Code);
        Assert.Contains(model.DetailPart, refusal.Message, StringComparison.Ordinal);
        Assert.DoesNotContain('\n', refusal.Message);
        Assert.EndsWith(".", refusal.Message, StringComparison.Ordinal);
        if (model.RuntimeOnly)
        {
            // The engine's load alone accepts it; only the runtime build finds the fault.
            OnnxModel.Load(model.Bytes, "hostile");
        }
    }

    [Fact]
    public void TheCycleModelIsTheSmallOneFromTheReport()
    {
        var cycle = HostileModels.All[0];
        Assert.True(cycle.Bytes.Length < 200, $"The cycle model is {cycle.Bytes.Length} bytes.");
        var refusal = Refusal(() => OnnxModel.Load(cycle.Bytes, "cycle"));
        Assert.Contains("'ia'", refusal.Message, StringComparison.Ordinal);
        Assert.Contains("'ib'", refusal.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void ValidModelsPassTheRuntimeBuild()
    {
        RuntimeModelCheck.Check(HostileModels.MatMul().ToBytes(), TimeSpan.FromSeconds(20));
        RuntimeModelCheck.Check(WeightLocationTests.IfModel(), TimeSpan.FromSeconds(20));
    }

    [Fact]
    public void ARuntimeBuildOverItsTimeLimitIsRefused()
    {
        var refusal = Assert.Throws<EngineException>(() => RuntimeModelCheck.Check(HostileModels.MatMul().ToBytes(), TimeSpan.Zero));
        Assert.Equal("model-check-timeout", refusal.Code);
    }

    [Theory]
    [InlineData("[ONNXRuntimeError] : 1 : FAIL : Node (fc) Op (MatMul) [ShapeInferenceError] Incompatible dimensions", "fc")]
    [InlineData("[ONNXRuntimeError] : 10 : INVALID_GRAPH : This is an invalid model. In Node, (\"mystery\", Frobnicate, \"\", -1) : (\"y\": tensor(float),) -> (\"z\",) , Error No Op registered for Frobnicate with domain_version of 13", "mystery")]
    [InlineData("[ONNXRuntimeError] : 1 : FAIL : Load model failed: opset 9999 is not supported", null)]
    public void TheNodeNameIsReadFromEitherFormOfTheRuntimeMessage(string message, string? node) =>
        Assert.Equal(node, RuntimeModelCheck.NodeName(message));

    [Fact]
    public void AKernelConstructorFailureIsToldWithoutTheRuntimesSourcePaths()
    {
        // ONNX Runtime 1.31's message for an ImageScaler node without its attributes, as the service logged it.
        const string message = "[ONNXRuntimeError] : 1 : FAIL : Exception during initialization: /onnxruntime_src/onnxruntime/contrib_ops/cpu/image_scaler.h:20 onnxruntime::contrib::ImageScaler<T>::ImageScaler(const onnxruntime::OpKernelInfo&) [with T = float] [ONNXRuntimeError] : 1 : FAIL : No attribute with this name is defined";

        var refusal = RuntimeModelCheck.Refusal(message);

        Assert.Equal("ONNX Runtime refused the model: Exception during initialization: No attribute with this name is defined. Re-export the model and check it with onnx.checker.", refusal.Message);
    }

    private static EngineException Refusal(Action load)
    {
        var task = Task.Run(load);
        Assert.True(((IAsyncResult)task).AsyncWaitHandle.WaitOne(TimeSpan.FromSeconds(30)), "Loading the model did not finish within 30 s.");
        Assert.True(task.IsFaulted, "The model was accepted.");
        return Assert.IsType<EngineException>(task.Exception!.InnerException);
    }
}
