using Microsoft.ML.OnnxRuntime;
using Microsoft.ML.OnnxRuntime.Tensors;

namespace Bitbudget.Search.Evaluation;

/// <summary>Moves arrays in and out of ONNX Runtime values.</summary>
internal static class OrtTensors
{
    /// <summary>
    /// Samples [start, start + count) of <paramref name="array"/> along <paramref name="axis"/> as a tensor of
    /// <paramref name="rows"/> samples (padding repeats the last real sample); a null axis feeds the array whole (a constant).
    /// </summary>
    public static OrtValue SliceSamples(NpyArray array, int? axis, int start, int count, int rows)
    {
        if (axis is not int k)
        {
            return Wrap(array.Data, array.Shape.ToArray());
        }

        var slice = SampleSlicer.Slice(array.Data, array.Shape, k, start, count, rows, out var shape);
        return Wrap(slice, shape);
    }

    /// <summary>Wraps a typed array (pinned, not copied) as a tensor of the given shape.</summary>
    public static OrtValue Wrap(Array data, long[] shape) => data switch
    {
        float[] f => OrtValue.CreateTensorValueFromMemory(f, shape),
        double[] d => OrtValue.CreateTensorValueFromMemory(d, shape),
        long[] l => OrtValue.CreateTensorValueFromMemory(l, shape),
        int[] i => OrtValue.CreateTensorValueFromMemory(i, shape),
        byte[] b => OrtValue.CreateTensorValueFromMemory(b, shape),
        sbyte[] s => OrtValue.CreateTensorValueFromMemory(s, shape),
        bool[] z => OrtValue.CreateTensorValueFromMemory(z, shape),
        Half[] h => OrtValue.CreateTensorValueFromMemory(Array.ConvertAll(h, x => new Float16(BitConverter.HalfToUInt16Bits(x))), shape),
        _ => throw new NotSupportedException($"Arrays of {data.GetType().Name} cannot be fed to ONNX Runtime."),
    };

    /// <summary>
    /// Copies the first <paramref name="rows"/> rows of a tensor into a typed array (padding rows of a fixed batch are dropped).
    /// </summary>
    public static Array CopyRows(OrtValue value, int rows, out long[] shape)
    {
        var info = value.GetTensorTypeAndShape();
        shape = info.Shape;
        var perRow = 1L;
        for (var i = 1; i < shape.Length; i++)
        {
            perRow *= shape[i];
        }

        var keep = shape.Length == 0 ? 1 : Math.Min(rows, shape[0]) * perRow;
        if (shape.Length > 0)
        {
            shape = (long[])shape.Clone();
            shape[0] = Math.Min(rows, shape[0]);
        }

        return info.ElementDataType switch
        {
            TensorElementType.Float => value.GetTensorDataAsSpan<float>()[..(int)keep].ToArray(),
            TensorElementType.Double => value.GetTensorDataAsSpan<double>()[..(int)keep].ToArray(),
            TensorElementType.Int64 => value.GetTensorDataAsSpan<long>()[..(int)keep].ToArray(),
            TensorElementType.Int32 => value.GetTensorDataAsSpan<int>()[..(int)keep].ToArray(),
            TensorElementType.UInt8 => value.GetTensorDataAsSpan<byte>()[..(int)keep].ToArray(),
            TensorElementType.Int8 => value.GetTensorDataAsSpan<sbyte>()[..(int)keep].ToArray(),
            TensorElementType.Bool => value.GetTensorDataAsSpan<bool>()[..(int)keep].ToArray(),
            TensorElementType.Float16 => Array.ConvertAll(value.GetTensorDataAsSpan<Float16>()[..(int)keep].ToArray(), x => BitConverter.UInt16BitsToHalf(x.value)),
            var other => throw new EngineException("model-output-unsupported", $"A model tensor has element type {other}, which the engine cannot read back."),
        };
    }

    /// <summary>Converts any numeric array to float for the output metrics.</summary>
    public static float[] ToFloat(Array data) => data switch
    {
        float[] f => f,
        double[] d => Array.ConvertAll(d, x => (float)x),
        long[] l => Array.ConvertAll(l, x => (float)x),
        int[] i => Array.ConvertAll(i, x => (float)x),
        byte[] b => Array.ConvertAll(b, x => (float)x),
        sbyte[] s => Array.ConvertAll(s, x => (float)x),
        bool[] z => Array.ConvertAll(z, x => x ? 1f : 0f),
        Half[] h => Array.ConvertAll(h, x => (float)x),
        _ => throw new NotSupportedException(data.GetType().Name),
    };

    /// <summary>Concatenates per-batch arrays of one tensor along the sample axis.</summary>
    public static Array Concatenate(IReadOnlyList<Array> parts)
    {
        var total = parts.Sum(p => p.LongLength);
        var result = Array.CreateInstance(parts[0].GetType().GetElementType()!, total);
        long offset = 0;
        foreach (var part in parts)
        {
            Array.Copy(part, 0, result, offset, part.LongLength);
            offset += part.LongLength;
        }

        return result;
    }
}
