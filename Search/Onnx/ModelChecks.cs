using Google.Protobuf;
using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>The refusals that need no graph analysis: not ONNX at all, external data, already quantized.</summary>
internal static class ModelChecks
{
    private static readonly byte[] PngSignature = [0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A];

    private static readonly HashSet<string> QuantizedOps = new(StringComparer.Ordinal)
    {
        "QuantizeLinear", "DequantizeLinear", "DynamicQuantizeLinear", "MatMulInteger", "ConvInteger",
        "DynamicQuantizeMatMul", "MatMulNBits", "QGemm", "QAttention", "DynamicQuantizeLSTM",
    };

    public static P.ModelProto Parse(byte[] bytes, string name)
    {
        if (bytes.Length == 0)
        {
            throw NotOnnx($"The file '{name}' is empty; an FP32 model's .onnx file is needed.");
        }

        if (bytes.AsSpan().StartsWith(PngSignature))
        {
            throw NotOnnx($"The file '{name}' is a PNG image, not an ONNX model; an FP32 model's .onnx file is needed.");
        }

        P.ModelProto model;
        try
        {
            model = P.ModelProto.Parser.ParseFrom(bytes);
        }
        catch (InvalidProtocolBufferException ex)
        {
            throw NotOnnx($"The file '{name}' is not a readable ONNX model (it is truncated or not an ONNX protobuf); the complete .onnx file is needed.", ex);
        }

        if (model.Graph is null || model.IrVersion <= 0 || model.OpsetImport.Count == 0)
        {
            throw NotOnnx($"The file '{name}' is not an ONNX model (it has no graph, IR version or opset); an FP32 model's .onnx file is needed.");
        }

        return model;
    }

    public static long DefaultOpset(P.ModelProto model)
    {
        foreach (var opset in model.OpsetImport)
        {
            if (opset.Domain is "" or "ai.onnx")
            {
                return opset.Version;
            }
        }

        throw new EngineException("model-invalid", "The model imports no version of the standard ONNX operator set (domain \"\"); export it with a standard opset.");
    }

    /// <summary>Refuses external data before anything could follow a path: an upload must be self-contained.</summary>
    public static void RefuseExternalData(P.ModelProto model)
    {
        foreach (var graph in AllGraphs(model.Graph))
        {
            foreach (var tensor in graph.Initializer)
            {
                Check(tensor);
            }

            foreach (var sparse in graph.SparseInitializer)
            {
                Check(sparse.Values);
                Check(sparse.Indices);
            }

            foreach (var node in graph.Node)
            {
                foreach (var attribute in node.Attribute)
                {
                    Check(attribute.T);
                    foreach (var tensor in attribute.Tensors)
                    {
                        Check(tensor);
                    }

                    Check(attribute.SparseTensor?.Values);
                    Check(attribute.SparseTensor?.Indices);
                }
            }
        }

        static void Check(P.TensorProto? tensor)
        {
            if (tensor is null || !TensorCodec.IsExternal(tensor))
            {
                return;
            }

            throw new EngineException(
                "model-external-data",
                $"Tensor '{tensor.Name}' keeps its data in an external file; every weight must be embedded in the .onnx file (save the model without external data).");
        }
    }

    public static void RefuseQuantizedOps(P.ModelProto model)
    {
        foreach (var graph in AllGraphs(model.Graph))
        {
            foreach (var node in graph.Node)
            {
                if (QuantizedOps.Contains(node.OpType) || node.OpType.StartsWith("QLinear", StringComparison.Ordinal))
                {
                    var label = Label(node);
                    throw new EngineException(
                        "model-already-quantized",
                        $"The model is already quantized: node '{label}' is {node.OpType}; give the FP32 model instead.");
                }
            }
        }
    }

    /// <summary>The graph and every subgraph nested in node attributes, outer graphs first.</summary>
    public static IEnumerable<P.GraphProto> AllGraphs(P.GraphProto graph)
    {
        yield return graph;
        foreach (var node in graph.Node)
        {
            foreach (var attribute in node.Attribute)
            {
                if (attribute.G is not null)
                {
                    foreach (var inner in AllGraphs(attribute.G))
                    {
                        yield return inner;
                    }
                }

                foreach (var g in attribute.Graphs)
                {
                    foreach (var inner in AllGraphs(g))
                    {
                        yield return inner;
                    }
                }
            }
        }
    }

    /// <summary>The node's attribute called <paramref name="name"/>, or null when it has none.</summary>
    public static P.AttributeProto? Attribute(P.NodeProto node, string name) =>
        node.Attribute.FirstOrDefault(a => a.Name == name);

    /// <summary>How error messages name a node: its name, else its first output, else its operator.</summary>
    public static string Label(P.NodeProto node) =>
        node.Name.Length > 0 ? node.Name : node.Output.FirstOrDefault(o => o.Length > 0) ?? node.OpType;

    private static EngineException NotOnnx(string message, Exception? inner = null) => new("model-not-onnx", message, inner);
}
