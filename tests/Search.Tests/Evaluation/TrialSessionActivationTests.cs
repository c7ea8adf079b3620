using Bitbudget.Search.Evaluation;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;
using Bitbudget.Search.Tests.Support;
using Google.Protobuf;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Search.Tests.Evaluation;

public sealed class TrialSessionActivationTests
{
    [Theory]
    [InlineData(ActivationCalibration.MinMax)]
    [InlineData(ActivationCalibration.Percentile)]
    public void WithEverySwitchOffTheInstrumentedSessionReproducesTheWeightsOnlyReferenceBitForBit(ActivationCalibration calibration)
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        using var plain = TrialSession.Open(model, data);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(Activations: calibration, CutEveryLayer: true));
        Assert.Equal(3, session.Activations.Count);

        TrialSessionTests.AssertBitwiseEqual(plain.ReferenceOutputs, session.ReferenceOutputs);
        TrialSessionTests.AssertBitwiseEqual(plain.ReferenceOutputs, session.RunFull(model.Layers.ToDictionary(l => l.Name, model.GetWeight)));
        Assert.True(session.SuffixAvailable);
        foreach (var layer in model.Layers.Skip(1))
        {
            TrialSessionTests.AssertBitwiseEqual(plain.ReferenceOutputs, session.RunSuffix(layer, model.GetWeight(layer)));
        }

        // Weight-only trials through the instrumented session are the weight-only trials of before.
        var weights = model.Layers.ToDictionary(l => l.Name, l => plain.Quantized(l, new LayerSetting(3)));
        TrialSessionTests.AssertBitwiseEqual(plain.RunFull(weights), session.RunFull(weights));
    }

    [Fact]
    public void QuantizingTheInputActivationLowersEveryLayersSqnrAt8Bits()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        using var weightsOnly = TrialSession.Open(model, data);
        using var withActivations = TrialSession.Open(model, data, new TrialSessionOptions(Activations: ActivationCalibration.MinMax));

        foreach (var layer in model.Layers)
        {
            var setting = new LayerSetting(8);
            var alone = weightsOnly.MeasureLayer(layer, setting);
            var both = withActivations.MeasureLayer(layer, setting);
            Assert.True(both.SqnrDb < alone.SqnrDb, $"{layer.Name}: weights and activations {both.SqnrDb:0.00} dB, weights only {alone.SqnrDb:0.00} dB");

            // The activation alone (FP32 weight, switch on) adds noise of its own that the weights-only trial misses.
            var activationOnly = OutputComparer.Compare(weightsOnly.ReferenceOutputs, withActivations.RunFull(new Dictionary<string, float[]>(), [layer.Name]), null);
            Assert.True(double.IsFinite(activationOnly.SqnrDb) && activationOnly.SqnrDb > both.SqnrDb);
            // Independent noise sources add in power (common practice); the measurement should agree within 1 dB.
            var combined = -10 * Math.Log10(Math.Pow(10, -alone.SqnrDb / 10) + Math.Pow(10, -activationOnly.SqnrDb / 10));
            Assert.InRange(both.SqnrDb, combined - 1, combined + 1);
            Console.WriteLine($"{layer.Name} at 8 bits: weights only {alone.SqnrDb:0.00} dB, activation only {activationOnly.SqnrDb:0.00} dB, both {both.SqnrDb:0.00} dB");

            // FP32 weights keep the activation FP32 too: the switch follows integer widths only.
            Assert.True(double.IsPositiveInfinity(withActivations.MeasureLayer(layer, LayerSetting.KeepFloat32).SqnrDb));
        }
    }

    [Fact]
    public void SuffixTrialWithTheActivationSwitchedOnMatchesTheFullTrial()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        using var withSuffix = TrialSession.Open(model, data, new TrialSessionOptions(Activations: ActivationCalibration.MinMax, CutEveryLayer: true));
        using var without = TrialSession.Open(model, data, new TrialSessionOptions(SuffixRuns: false, Activations: ActivationCalibration.MinMax));

        foreach (var layer in model.Layers)
        {
            var setting = new LayerSetting(4);
            Assert.Equal(without.MeasureLayer(layer, setting), withSuffix.MeasureLayer(layer, setting, trialsForLayer: 1000));
        }

        var last = model.Layers[^1];
        var weight = withSuffix.Quantized(last, new LayerSetting(4));
        TrialSessionTests.AssertBitwiseEqual(
            withSuffix.RunFull(new Dictionary<string, float[]> { [last.Name] = weight }, [last.Name]),
            withSuffix.RunSuffix(last, weight, quantizeActivation: true));
    }

    [Fact]
    public void MinMaxScaleAndZeroPointMatchAHandComputationFromTheCapturedTensor()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(Activations: ActivationCalibration.MinMax));

        // fc1 reads the model input x: its values are the dataset's. fc2 reads h1 = Relu(x w1), captured here
        // by ONNX Runtime from the model with h1 as an extra output.
        var x = (float[])data.Inputs[0].Data;
        var h1 = Capture(model, data, "h1");
        AssertAffine(x, session.Activations.Single(a => a.Layer == model.Layers[0].Name));
        AssertAffine(h1, session.Activations.Single(a => a.Layer == model.Layers[1].Name && a.Tensor == "h1"));
        Assert.Equal(0, session.Activations.Single(a => a.Tensor == "h1").ZeroPoint);
    }

    [Fact]
    public void PercentileClipsTheModelInputInsideItsMinMaxRange()
    {
        var model = SmallModels.Mlp();
        var data = SmallModels.MlpData(model);
        using var session = TrialSession.Open(model, data, new TrialSessionOptions(Activations: ActivationCalibration.Percentile));

        // Order statistics at p and 100 - p with linear interpolation between neighbours (the definition NumPy's
        // default 'linear' percentile uses, from memory), computed here in double.
        var sorted = ((float[])data.Inputs[0].Data).Select(v => (double)v).Order().ToArray();
        double Quantile(double p)
        {
            var rank = p / 100 * (sorted.Length - 1);
            var below = (int)Math.Floor(rank);
            return sorted[below] + ((rank - below) * (sorted[Math.Min(below + 1, sorted.Length - 1)] - sorted[below]));
        }

        var low = Quantile(100 - ActivationQuantization.Percentile);
        var high = Quantile(ActivationQuantization.Percentile);
        Assert.True(low > sorted[0] && high < sorted[^1]);
        var fc1 = session.Activations.Single(a => a.Layer == model.Layers[0].Name);
        Assert.Equal((high - low) / 255, fc1.Scale, 1e-6 * fc1.Scale);
        Assert.Equal((int)Math.Round(-low / ((high - low) / 255), MidpointRounding.ToEven), fc1.ZeroPoint);
    }

    [Fact]
    public void PercentileCalibrationRefusesToKeepMoreActivationValuesThanAllowed()
    {
        var model = SmallModels.Mlp();
        var options = new TrialSessionOptions(MaxCachedActivationBytes: 4096, Activations: ActivationCalibration.Percentile);

        var error = Assert.Throws<EngineException>(() => TrialSession.Open(model, SmallModels.MlpData(model), options));

        Assert.Equal("activations-too-large", error.Code);
        Assert.Contains("min-max", error.Message);
    }

    [Fact]
    public void SessionBelowOpset13RefusesActivationQuantization()
    {
        var model = SmallModels.Mlp(opset: 11);

        var error = Assert.Throws<EngineException>(() => TrialSession.Open(model, SmallModels.MlpData(model), new TrialSessionOptions(Activations: ActivationCalibration.MinMax)));

        Assert.Equal("settings-invalid", error.Code);
        Assert.Contains("opset 13", error.Message);
    }

    /// <summary>
    /// The asymmetric 8-bit scheme of Jacob et al. (2018, "Quantization and Training of Neural Networks for
    /// Efficient Integer-Arithmetic-Only Inference", eq. 1): range widened to hold 0, s = (max - min) / 255,
    /// z = round(-min / s), so that real 0 maps to the integer z exactly. Computed in double.
    /// </summary>
    private static void AssertAffine(float[] values, ActivationQuantization actual)
    {
        double min = Math.Min(values.Min(), 0f);
        double max = Math.Max(values.Max(), 0f);
        var scale = (max - min) / 255;
        Assert.Equal(scale, actual.Scale, 1e-6 * scale);
        Assert.Equal((int)Math.Round(-min / scale, MidpointRounding.ToEven), actual.ZeroPoint);
    }

    private static float[] Capture(OnnxModel model, CalibrationSet data, string tensor)
    {
        var proto = new GraphSlicer(model.Proto).WithExtraOutputs([tensor]);
        using var session = new InferenceSession(proto.ToByteArray());
        var input = data.Inputs[0];
        using var value = OrtValue.CreateTensorValueFromMemory((float[])input.Data, input.Shape.ToArray());
        using var results = session.Run(new RunOptions(), [model.Inputs[0].Name], [value], [tensor]);
        return results[0].GetTensorDataAsSpan<float>().ToArray();
    }
}
