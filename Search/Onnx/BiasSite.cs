using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Where a layer's bias is added, so bias correction (<see cref="Quantization.BiasCorrection"/>) can move it: the
/// bias input of the layer's one reader (Conv B, Gemm C, the B of LSTM/GRU/RNN, whose first half is W's bias), or, for
/// a MatMul, which has none, an Add of a bias after it. A layer without a bias gets one (Conv B, Gemm C, recurrent B,
/// the MatMul's Add), holding the correction alone. Trials feed the bias as a graph input (<see cref="AddSessionInput"/>),
/// the FP32 runs with the layer's own bias (or zeros), so the reference is unchanged; the export writes the corrected
/// values (<see cref="Export"/>), in place of the layer's own bias constant when nothing else reads it.
/// </summary>
internal sealed class BiasSite
{
    private readonly string _consumer;
    private readonly int _input;
    private readonly string? _source;
    private readonly bool _sourceIsConstantNode;
    private readonly bool _exclusive;
    private readonly int _rowsPerDirection;
    private readonly double _outputScale;

    private BiasSite(WeightLayer layer, P.NodeProto consumer, int input, string? source, bool constantNode, bool exclusive, long[] dims, float[] original, int rowsPerDirection, double outputScale)
    {
        Layer = layer.Name;
        _consumer = consumer.Name;
        _input = input;
        _source = source;
        _sourceIsConstantNode = constantNode;
        _exclusive = exclusive;
        Dims = dims;
        Original = original;
        _rowsPerDirection = rowsPerDirection;
        _outputScale = outputScale;
        InputName = DerivedNames.Of(layer.WeightName, "bias");
    }

    /// <summary>The layer whose bias this is.</summary>
    public string Layer { get; }

    /// <summary>The graph input a trial session feeds the bias through (and the name of a bias the export adds).</summary>
    public string InputName { get; }

    /// <summary>The bias's shape as its reader takes it.</summary>
    public long[] Dims { get; }

    /// <summary>The layer's own bias (zeros for a layer without one), in C order.</summary>
    public float[] Original { get; }

    /// <summary>
    /// The bias site of <paramref name="layer"/>, or null with the reason (a sentence fragment) why it has none.
    /// </summary>
    public static BiasSite? Find(OnnxModel model, WeightLayer layer, out string reason)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(layer);
        var graph = model.Proto.Graph;
        reason = string.Empty;
        if (layer.Consumers.Count != 1)
        {
            reason = "its weight is read by several nodes (tied), each with its own bias and inputs";
            return null;
        }

        var node = graph.Node.FirstOrDefault(n => n.Name == layer.Consumers[0] && n.Input.Count > 1 && n.Input[1] == layer.WeightName);
        if (node is null)
        {
            reason = "its reader is inside an If/Loop body or does not read the weight as its second input";
            return null;
        }

        int input;
        long[] dims;
        var rowsPerDirection = 0;
        var outputScale = 1.0;
        switch (node.OpType)
        {
            case "Conv" when layer.Shape.Count is 3 or 4:
                input = 2;
                dims = [layer.Shape[0]];
                break;
            case "Gemm" when layer.Shape.Count == 2:
                input = 2;
                var transB = ModelChecks.Attribute(node, "transB")?.I == 1;
                dims = [transB ? layer.Shape[0] : layer.Shape[1]];
                var alpha = ModelChecks.Attribute(node, "alpha")?.F ?? 1f;
                var beta = ModelChecks.Attribute(node, "beta")?.F ?? 1f;
                if (beta == 0)
                {
                    reason = "its Gemm has beta = 0, so C is never added";
                    return null;
                }

                // Gemm gives alpha A B + beta C: a shift of the product's mean moves the output by alpha, C by beta.
                outputScale = alpha / (double)beta;
                break;
            case "MatMul" when layer.Shape.Count == 2:
                input = -1;
                dims = [layer.Shape[1]];
                break;
            case "LSTM" or "GRU" or "RNN" when layer.Shape.Count == 3 && layer.Name.EndsWith(".W", StringComparison.Ordinal):
                input = 3;
                rowsPerDirection = (int)layer.Shape[1];
                dims = [layer.Shape[0], 2 * layer.Shape[1]];
                break;
            default:
                reason = node.OpType switch
                {
                    "Gather" => "a table lookup has no bias",
                    "ConvTranspose" => "ConvTranspose has no one input vector per output, so its inputs' mean is not gathered",
                    "LSTM" or "GRU" or "RNN" => "R multiplies the recurrent state, which the graph never exposes",
                    _ => $"{node.OpType} has no bias input this engine corrects",
                };
                return null;
        }

        var count = (int)TensorCodec.ElementCount(dims);
        var original = new float[count];
        string? source = null;
        var constantNode = false;
        var exclusive = false;
        if (input >= 0 && input < node.Input.Count && node.Input[input].Length > 0)
        {
            source = node.Input[input];
            var tensor = graph.Initializer.FirstOrDefault(t => t.Name == source);
            if (tensor is null && graph.Node.FirstOrDefault(n => n.OpType == "Constant" && n.Output.Count == 1 && n.Output[0] == source) is { } constant)
            {
                tensor = ModelChecks.Attribute(constant, "value")?.T;
                constantNode = true;
            }

            if (tensor is null || TensorCodec.IsExternal(tensor) || (P.TensorProto.Types.DataType)tensor.DataType != P.TensorProto.Types.DataType.Float)
            {
                reason = $"its bias '{source}' is not an FP32 constant of the main graph";
                return null;
            }

            var values = TensorCodec.ToFloats(tensor);
            if (values.Length != count || (node.OpType == "Gemm" && !(tensor.Dims.Count == 1 || tensor.Dims is [1, _])))
            {
                reason = $"its bias '{source}' is not one value per output";
                return null;
            }

            original = values;
            dims = [.. tensor.Dims];
            exclusive = Readers(graph, source) == 1 && graph.Output.All(o => o.Name != source);
        }

        return new BiasSite(layer, node, input, source, constantNode, exclusive, dims, original, rowsPerDirection, outputScale);
    }

    /// <summary>
    /// The corrected bias: the layer's own plus <paramref name="shift"/>, the output shift indexed as
    /// <see cref="Quantization.LinearLayout.Output"/> (for a recurrent W, the gate rows of each direction, which are the
    /// first half of each direction's B), each sum rounded once to FP32 as the bias is stored.
    /// </summary>
    public float[] Corrected(ReadOnlySpan<float> shift)
    {
        var result = (float[])Original.Clone();
        for (var i = 0; i < shift.Length; i++)
        {
            var at = _rowsPerDirection > 0 ? ((i / _rowsPerDirection) * 2 * _rowsPerDirection) + (i % _rowsPerDirection) : i;
            result[at] = (float)(Original[at] + (_outputScale * shift[i]));
        }

        return result;
    }

    /// <summary>
    /// Makes the layer read its bias from the graph input <see cref="InputName"/> (a trial session's model); its own bias
    /// constant, read by nothing else, leaves the graph (ONNX Runtime would warn about it at every session build).
    /// </summary>
    public void AddSessionInput(P.GraphProto graph)
    {
        ArgumentNullException.ThrowIfNull(graph);
        graph.Input.Add(OnnxModel.FloatInput(InputName, Dims));
        ReadFrom(graph, InputName);
        if (_source is null || !_exclusive)
        {
            return;
        }

        if (_sourceIsConstantNode)
        {
            graph.Node.Remove(graph.Node.First(n => n.OpType == "Constant" && n.Output.Count == 1 && n.Output[0] == _source));
            return;
        }

        graph.Initializer.Remove(graph.Initializer.First(t => t.Name == _source));
        if (graph.Input.FirstOrDefault(i => i.Name == _source) is { } listed)
        {
            graph.Input.Remove(listed);
        }
    }

    /// <summary>
    /// Writes <paramref name="corrected"/> into the exported graph: over the layer's own bias constant when only this
    /// layer reads it, else as a new initializer named <see cref="InputName"/> that the layer reads.
    /// </summary>
    public void Export(P.GraphProto graph, ReadOnlySpan<float> corrected)
    {
        ArgumentNullException.ThrowIfNull(graph);
        if (_source is not null && _exclusive)
        {
            if (_sourceIsConstantNode)
            {
                var constant = graph.Node.First(n => n.OpType == "Constant" && n.Output.Count == 1 && n.Output[0] == _source);
                var value = constant.Attribute.First(a => a.Name == "value");
                value.T = TensorCodec.FromFloats(value.T.Name, value.T.Dims, corrected);
            }
            else
            {
                var at = graph.Initializer.Select((t, i) => (t, i)).First(p => p.t.Name == _source).i;
                graph.Initializer[at] = TensorCodec.FromFloats(_source, graph.Initializer[at].Dims, corrected);
            }

            return;
        }

        graph.Initializer.Add(TensorCodec.FromFloats(InputName, Dims, corrected));
        ReadFrom(graph, InputName);
    }

    /// <summary>
    /// Bytes the export's bias adds to the written file (negative never; zero when the layer's own raw FP32 bias is
    /// overwritten), counted on the very entries <see cref="Export"/> changes.
    /// </summary>
    public long ExportFileBytes(P.GraphProto graph)
    {
        ArgumentNullException.ThrowIfNull(graph);
        var scratch = new P.GraphProto();
        scratch.Node.Add(graph.Node.First(n => n.Name == _consumer).Clone());
        if (_source is not null)
        {
            scratch.Node.AddRange(graph.Node.Where(n => n.OpType == "Constant" && n.Output.Count == 1 && n.Output[0] == _source).Select(n => n.Clone()));
            scratch.Initializer.AddRange(graph.Initializer.Where(t => t.Name == _source).Select(t => t.Clone()));
        }

        var before = scratch.CalculateSize();
        Export(scratch, new float[Original.Length]);
        return scratch.CalculateSize() - before;
    }

    /// <summary>Points the layer's bias input at <paramref name="name"/>; a MatMul gets an Add of it after its output.</summary>
    private void ReadFrom(P.GraphProto graph, string name)
    {
        var position = graph.Node.Select((n, i) => (n, i)).First(p => p.n.Name == _consumer).i;
        var node = graph.Node[position];
        if (_input < 0)
        {
            var output = node.Output[0];
            var product = DerivedNames.Of(output, "product");
            node.Output[0] = product;
            var add = new P.NodeProto { Name = DerivedNames.Of(_consumer, "bias"), OpType = "Add" };
            add.Input.Add(product);
            add.Input.Add(name);
            add.Output.Add(output);
            graph.Node.Insert(position + 1, add);
            return;
        }

        while (node.Input.Count <= _input)
        {
            node.Input.Add(string.Empty);
        }

        node.Input[_input] = name;
    }

    private static int Readers(P.GraphProto graph, string name) =>
        ModelChecks.AllGraphs(graph).SelectMany(g => g.Node).Sum(n => n.Input.Count(i => i == name));
}
