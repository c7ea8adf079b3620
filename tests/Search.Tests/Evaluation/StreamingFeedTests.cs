using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;

namespace Bitbudget.Search.Tests.Evaluation;

/// <summary>
/// Feeding a stateful model: a scalar int64 input fed as a constant, a state input whose samples lie on
/// axis 1, and a next-state output whose samples lie on axis 1, from a .npz written by NumPy. The outside
/// reference is ONNX Runtime running the same model on the whole dataset in one batch.
/// </summary>
public sealed class StreamingFeedTests
{
    [Fact]
    public void ScalarRateIsAConstantAndTheStateIsSampledAlongAxisOne()
    {
        var set = StreamingData.Set(StreamingData.Model());

        Assert.Equal(40, set.SampleCount);
        Assert.Equal([0, 1, (int?)null], set.SampleAxes);
        Assert.Null(set.SamplesPerRun);

        var slice = set.Slice(3, 2);
        Assert.Equal([2L, 8], slice[0].Shape);
        Assert.Equal([2L, 2, 6], slice[1].Shape);
        Assert.Empty(slice[2].Shape);

        // state[1, 4, 5] of the NumPy array is the second sample's [1, 1, 5] in the slice.
        var state = (float[])set.Inputs[1].Data;
        Assert.Equal(state[(1 * 40 + 4) * 6 + 5], ((float[])slice[1].Data)[(1 * 2 + 1) * 6 + 5]);
    }

    [Fact]
    public void BatchedReferenceRunJoinsEveryOutputAlongItsOwnSampleAxisAsOnnxRuntimeComputesIt()
    {
        var model = StreamingData.Model();
        // Batches of 16, 16 and 8: the next state is joined along axis 1 from uneven parts.
        using var session = TrialSession.Open(model, StreamingData.Set(model), new TrialSessionOptions(MaxBatch: 16));
        var ort = StreamingData.RunInOrt(SmallModels.StreamingBytes());

        Assert.Equal(0, session.OutputAxes["probability"]);
        Assert.Equal(1, session.OutputAxes["next_state"]);
        var next = session.ReferenceOutputs.Single(o => o.Name == "next_state");
        Assert.Equal([2L, 40, 6], next.Shape);
        Assert.True(OrtRunner.MaxRelativeDifference(ort["next_state"], next.Data) < 1e-6);
        Assert.True(OrtRunner.MaxRelativeDifference(ort["probability"], session.ReferenceOutputs.Single(o => o.Name == "probability").Data) < 1e-6);
    }

    [Fact]
    public void PooledSqnrHidesTheProbabilityThatPerOutputSqnrShowsAsOnnxRuntimeMeasuresIt()
    {
        var model = StreamingData.Model();
        using var session = TrialSession.Open(model, StreamingData.Set(model));
        var head = model.Layers.Single(l => l.Name == "head");
        var setting = new LayerSetting(2, QuantizationScheme.Symmetric, Granularity.PerChannel, ClipMethod.MinMax);

        var metrics = session.MeasureLayer(head, setting);

        var probability = metrics.PerOutput.Single(o => o.Name == "probability");
        var state = metrics.PerOutput.Single(o => o.Name == "next_state");
        Assert.True(double.IsPositiveInfinity(state.SqnrDb)); // the head does not feed the state
        Assert.True(metrics.SqnrDb > probability.SqnrDb + 20, $"pooled {metrics.SqnrDb:0.0} dB, probability {probability.SqnrDb:0.0} dB");

        // Outside check: ONNX Runtime runs the model with the head's weight replaced by the same fake-quantized values.
        var fp32 = StreamingData.RunInOrt(SmallModels.StreamingBytes());
        var quantized = StreamingData.RunInOrt(WithWeight(SmallModels.StreamingBytes(), "w_head", session.Quantized(head, setting)));
        Assert.Equal(StreamingData.Sqnr(fp32["probability"], quantized["probability"]), probability.SqnrDb, 2);
    }

    [Fact]
    public void SampleAxisGivenOutrightOverridesTheRuleAndErrorsNameInputAxisAndSize()
    {
        var model = StreamingData.Model();
        var arrays = StreamingData.Arrays();

        var given = CalibrationSet.Create(arrays, model.Inputs, new Dictionary<string, int> { ["state"] = 1 });
        Assert.Equal(1, given.SampleAxes[1]);

        var wrong = Assert.Throws<EngineException>(() => CalibrationSet.Create(arrays, model.Inputs, new Dictionary<string, int> { ["state"] = 0 }));
        Assert.Equal("dataset-invalid", wrong.Code);
        Assert.Contains("'frame' has 40 on axis 0, 'state' has 2 on axis 0", wrong.Message);

        var outOfRange = Assert.Throws<EngineException>(() => CalibrationSet.Create(arrays, model.Inputs, new Dictionary<string, int> { ["state"] = 3 }));
        Assert.Contains("Sample axis 3 is given for model input 'state' [2,?,6], which has axes 0 to 2", outOfRange.Message);

        var scalar = Assert.Throws<EngineException>(() => CalibrationSet.Create(arrays, model.Inputs, new Dictionary<string, int> { ["rate"] = 0 }));
        Assert.Contains("'rate'", scalar.Message);
        Assert.Contains("scalar", scalar.Message);

        var rateVector = arrays.Select(a => a.Name == "rate" ? a with { Shape = [40], Data = new long[40] } : a).ToList();
        var vector = Assert.Throws<EngineException>(() => CalibrationSet.Create(rateVector, model.Inputs));
        Assert.Contains("Model input 'rate' is a scalar (rank 0): it takes one 0-d array", vector.Message);
        Assert.Contains("[40]", vector.Message);
    }

    private static byte[] WithWeight(byte[] model, string initializer, float[] values)
    {
        var proto = SmallModels.Parse(model);
        var tensor = proto.Graph.Initializer.Single(t => t.Name == initializer);
        tensor.RawData = Google.Protobuf.ByteString.CopyFrom(System.Runtime.InteropServices.MemoryMarshal.AsBytes(values.AsSpan()));
        return Google.Protobuf.MessageExtensions.ToByteArray(proto);
    }
}
