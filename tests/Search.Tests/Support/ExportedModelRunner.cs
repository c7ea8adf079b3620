using Bitbudget.Search.Evaluation;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Search.Tests.Support;

/// <summary>Runs an exported model in ONNX Runtime on a one-input calibration set, in one batch.</summary>
internal static class ExportedModelRunner
{
    public static List<OutputTensor> Run(byte[] bytes, CalibrationSet data, SessionOptions? options = null)
    {
        using var session = options is null ? new InferenceSession(bytes) : new InferenceSession(bytes, options);
        var input = data.Inputs[0];
        using var value = OrtValue.CreateTensorValueFromMemory((float[])input.Data, input.Shape.ToArray());
        using var runOptions = new RunOptions();
        using var results = session.Run(runOptions, [session.InputNames[0]], [value], session.OutputNames);
        return session.OutputNames
            .Select((name, i) => new OutputTensor(name, results[i].GetTensorDataAsSpan<float>().ToArray(), results[i].GetTensorTypeAndShape().Shape))
            .ToList();
    }
}
