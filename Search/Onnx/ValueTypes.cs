using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// What a graph declares about its values without running shape inference: element types and ranks from
/// inputs, outputs, value_info and initializers, and the tensors of constants. A subgraph sees the
/// declarations of the graphs around it.
/// </summary>
internal sealed class ValueTypes(ValueTypes? outer)
{
    private readonly Dictionary<string, P.TypeProto.Types.Tensor> declared = new(StringComparer.Ordinal);
    private readonly Dictionary<string, P.TensorProto> constants = new(StringComparer.Ordinal);

    public void AddGraph(P.GraphProto graph)
    {
        foreach (var value in graph.Input.Concat(graph.Output).Concat(graph.ValueInfo))
        {
            if (value.Type?.TensorType is { } tensor)
            {
                declared[value.Name] = tensor;
            }
        }

        foreach (var tensor in graph.Initializer)
        {
            constants[tensor.Name] = tensor;
        }

        foreach (var node in graph.Node)
        {
            if (node.OpType == "Constant" && node.Domain is "" or "ai.onnx" && node.Output.Count == 1
                && node.Attribute.FirstOrDefault(a => a.Name == "value")?.T is { } value)
            {
                constants[node.Output[0]] = value;
            }
        }
    }

    /// <summary>The value's element type when declared, FLOAT otherwise (the engine's models are FP32).</summary>
    public P.TensorProto.Types.DataType ElementType(string name)
    {
        if (constants.TryGetValue(name, out var tensor))
        {
            return (P.TensorProto.Types.DataType)tensor.DataType;
        }

        if (declared.TryGetValue(name, out var type) && type.ElemType != 0)
        {
            return (P.TensorProto.Types.DataType)type.ElemType;
        }

        return outer?.ElementType(name) ?? P.TensorProto.Types.DataType.Float;
    }

    /// <summary>The value's rank when declared or constant; null when unknown.</summary>
    public int? Rank(string name)
    {
        if (constants.TryGetValue(name, out var tensor))
        {
            return tensor.Dims.Count;
        }

        if (declared.TryGetValue(name, out var type) && type.Shape is not null)
        {
            return type.Shape.Dim.Count;
        }

        return outer?.Rank(name);
    }

    /// <summary>The tensor of an initializer or Constant node; null when the value is computed at run time.</summary>
    public P.TensorProto? Constant(string name) =>
        constants.TryGetValue(name, out var tensor) ? tensor : outer?.Constant(name);
}
