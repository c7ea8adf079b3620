using System.Globalization;
using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Rewrites a parsed model into the form the engine works on: every node named, inference-mode
/// BatchNormalization folded into the Conv before it, and every layer weight one FP32 initializer of
/// the main graph, so exporting or feeding weights is a matter of swapping one initializer.
/// </summary>
internal sealed class ModelNormaliser
{
    private readonly P.ModelProto model;
    private readonly List<string> notes = [];
    private readonly List<SkippedWeight> skipped = [];
    private readonly List<(P.NodeProto Node, GraphScope Scope)> nodes = [];
    private readonly HashSet<string> usedNames = new(StringComparer.Ordinal);
    private readonly HashSet<string> deadCandidates = new(StringComparer.Ordinal);
    private GraphScope main = null!;

    private ModelNormaliser(P.ModelProto model) => this.model = model;

    /// <summary>
    /// Constants smaller than this (in values) that no layer reads are not listed as skipped weights: they are
    /// scales, shifts and lookup vectors, not weight matrices (our own threshold, 4 KiB at FP32).
    /// </summary>
    public const long SkippedListingMinimum = 1024;

    public static (IReadOnlyList<WeightLayer> Layers, IReadOnlyList<string> Notes, IReadOnlyList<SkippedWeight> Skipped) Normalise(P.ModelProto model)
    {
        var normaliser = new ModelNormaliser(model);
        var layers = normaliser.Run();
        return (layers, normaliser.notes, normaliser.skipped);
    }

    private List<WeightLayer> Run()
    {
        NameNodes(model.Graph);
        main = BuildScopes(model.Graph, null, "");
        ValidateDefinitions();
        var readers = CountReaders();

        // Group consumers by the constant they read: a tied weight is one layer with several consumers.
        var groups = new List<LayerGroup>();
        var byConstant = new Dictionary<(GraphScope, string), LayerGroup>();
        foreach (var (node, scope) in nodes)
        {
            foreach (var (index, role) in WeightInputs.Of(node))
            {
                var label = scope.Prefix + node.Name;
                var resolution = Resolve(node.Input[index], scope);
                if (resolution.Source is null)
                {
                    // A Gather of a computed tensor is ordinary data movement, not a weight left behind.
                    if (node.OpType != "Gather")
                    {
                        NotLayer(node, label, node.Input[index], node.OpType == "MatMul"
                            ? "it multiplies two activations, so it has no constant weight"
                            : $"its input '{node.Input[index]}' is {resolution.Reason}");
                    }

                    continue;
                }

                var source = resolution.Source;
                if (node.OpType == "Gather" && !WeightInputs.IsTable(source))
                {
                    continue;
                }

                CheckWeightType(source, node, label);
                var key = (source.Scope, source.ConstantName);
                if (!byConstant.TryGetValue(key, out var group))
                {
                    group = new LayerGroup(source);
                    byConstant[key] = group;
                    groups.Add(group);
                }

                group.Consumers.Add(new LayerConsumer(node, scope, source, index, role));
            }
        }

        if (groups.Count == 0)
        {
            throw new EngineException(
                "model-no-layers",
                "The model has no quantizable layer: no Conv, ConvTranspose, Gemm, MatMul, LSTM, GRU, RNN or Gather reads a constant FP32 weight.");
        }

        ListSkippedConstants(byConstant.Keys.ToHashSet());
        var layers = new List<WeightLayer>(groups.Count);
        foreach (var group in groups)
        {
            var first = group.Consumers[0];
            var values = first.Source.ReadFloats();
            var shape = first.Source.Tensor.Dims.ToArray();
            var folded = TryFoldBatchNorm(group, values, shape, readers);
            var weightName = Hoist(group, values, shape);
            layers.Add(new WeightLayer(
                WeightInputs.LayerName(first.Scope.Prefix + first.Node.Name, first.Role),
                first.Node.OpType,
                weightName,
                shape,
                TensorCodec.ElementCount(shape),
                ChannelAxis(group, shape.Length),
                folded,
                group.Consumers.Select(c => c.Scope.Prefix + c.Node.Name).ToArray()));
        }

        RemoveDeadConstants();
        return layers;
    }

    /// <summary>A layer op whose weight is not a constant: a note (as before) and an entry in the skipped list.</summary>
    private void NotLayer(P.NodeProto node, string label, string input, string reason)
    {
        notes.Add(node.OpType == "MatMul"
            ? $"MatMul '{label}' multiplies two activations; not a weight layer."
            : $"{node.OpType} '{label}' is not a weight layer: {reason}.");
        skipped.Add(new SkippedWeight(label, node.OpType, input, 0, $"{node.OpType} '{label}' is not quantized: {reason}."));
    }

    /// <summary>
    /// The axis a layer is quantized along. A table read by a Gather is quantized per row (axis 0) even when a
    /// MatMul or Gemm also reads it (a tied output layer): the Gather needs one scale per looked-up row, and the
    /// output layer still reads exactly the dequantized table (see README, "Embedding tables").
    /// </summary>
    private static int ChannelAxis(LayerGroup group, int rank)
    {
        var chosen = group.Consumers.FirstOrDefault(c => c.Node.OpType == "Gather") ?? group.Consumers[0];
        return WeightInputs.ChannelAxis(chosen.Node, chosen.Index, rank);
    }

    /// <summary>
    /// Lists FP32 constants that no layer reads and that stay FP32: read by an operator the engine does not
    /// quantize, at least <see cref="SkippedListingMinimum"/> values, and with two or more dimensions above 1
    /// (biases and per-channel vectors are not weights worth listing).
    /// </summary>
    private void ListSkippedConstants(HashSet<(GraphScope, string)> layerConstants)
    {
        var listed = new HashSet<(GraphScope, string)>();
        foreach (var (node, scope) in nodes)
        {
            if (node.Domain is "" or "ai.onnx" && node.OpType is "Constant" or "Identity" or "Cast")
            {
                continue;
            }

            for (var i = 0; i < node.Input.Count; i++)
            {
                if (node.Input[i].Length == 0 || WeightInputs.IsAuxiliary(node, i))
                {
                    continue;
                }

                var source = Resolve(node.Input[i], scope).Source;
                if (source is null || !TensorCodec.IsCastableFloat(source.Tensor.DataType))
                {
                    continue;
                }

                var key = (source.Scope, source.ConstantName);
                var count = TensorCodec.ElementCount(source.Tensor.Dims);
                if (layerConstants.Contains(key) || count < SkippedListingMinimum || source.Tensor.Dims.Count(d => d > 1) < 2 || !listed.Add(key))
                {
                    continue;
                }

                var label = scope.Prefix + node.Name;
                var reason = node.OpType == "Gather"
                    ? $"Gather '{label}' reads a constant of {count} values that is not an FP32 table looked up by row (axis 0), the only Gather the engine quantizes."
                    : $"{node.OpType} '{label}' reads a constant of {count} values; {node.OpType} has no quantized form here (only Conv, ConvTranspose, Gemm, MatMul, LSTM, GRU, RNN and Gather weights are quantized).";
                skipped.Add(new SkippedWeight(label, node.OpType, node.Input[i], count, reason));
            }
        }
    }

    private static void CheckWeightType(WeightSource source, P.NodeProto node, string label)
    {
        if (TensorCodec.IsQuantizedInteger(source.Tensor.DataType))
        {
            throw new EngineException(
                "model-already-quantized",
                $"The model is already quantized: the weight '{source.ConstantName}' of node '{label}' is stored as {TensorCodec.TypeName(source.Tensor.DataType)}; give the FP32 model instead.");
        }

        if (source.ConsumedType != (int)P.TensorProto.Types.DataType.Float || !TensorCodec.IsCastableFloat(source.Tensor.DataType))
        {
            var type = TensorCodec.IsCastableFloat(source.Tensor.DataType) ? source.ConsumedType : source.Tensor.DataType;
            throw new EngineException(
                "model-non-float-weights",
                $"The weight '{source.ConstantName}' of {node.OpType} '{label}' is {TensorCodec.TypeName(type)}; only FP32 weights (or FP16 weights cast to FP32) are supported, so export the model in FP32.");
        }
    }

    /// <summary>Follows Identity and Cast back to an initializer or Constant node.</summary>
    private ValueResolution Resolve(string name, GraphScope scope)
    {
        var chain = new List<string>();
        var casts = new List<int>();
        var seen = new HashSet<(GraphScope, string)>();
        while (true)
        {
            chain.Add(name);
            var owner = scope.Find(name)!;
            if (!seen.Add((owner, name)))
            {
                // GraphCycles refuses loops before normalising; this keeps the walk finite whatever reaches it.
                throw new EngineException(
                    "model-invalid",
                    $"The model is invalid: value '{owner.Prefix}{name}' is computed from itself through {string.Join(" <- ", chain.Select(c => $"'{c}'"))}; re-export the model.");
            }

            if (owner.Initializers.TryGetValue(name, out var tensor))
            {
                casts.Reverse();
                return new ValueResolution(new WeightSource(owner, name, tensor, chain, casts), null);
            }

            if (owner.Inputs.Contains(name))
            {
                return new ValueResolution(null, owner == main ? "a graph input" : "an input of a subgraph");
            }

            var producer = owner.Producers[name];
            var standard = producer.Domain is "" or "ai.onnx";
            if (standard && producer.OpType == "Constant")
            {
                var constant = ConstantTensor(producer);
                if (constant is null)
                {
                    return new ValueResolution(null, $"a Constant node '{producer.Name}' without a dense tensor value");
                }

                casts.Reverse();
                return new ValueResolution(new WeightSource(owner, name, constant, chain, casts), null);
            }

            if (standard && producer.OpType is "Identity" or "Cast" && producer.Input.Count > 0)
            {
                if (producer.OpType == "Cast")
                {
                    casts.Add((int)(ModelChecks.Attribute(producer, "to")?.I ?? 0));
                }

                name = producer.Input[0];
                scope = owner;
                continue;
            }

            return new ValueResolution(null, $"computed at run time by {producer.OpType} node '{producer.Name}'");
        }
    }

    private static P.TensorProto? ConstantTensor(P.NodeProto node)
    {
        foreach (var attribute in node.Attribute)
        {
            var tensor = attribute.Name switch
            {
                "value" => attribute.T,
                "value_float" => Scalar(P.TensorProto.Types.DataType.Float, t => t.FloatData.Add(attribute.F), []),
                "value_floats" => Scalar(P.TensorProto.Types.DataType.Float, t => t.FloatData.AddRange(attribute.Floats), [attribute.Floats.Count]),
                "value_int" => Scalar(P.TensorProto.Types.DataType.Int64, t => t.Int64Data.Add(attribute.I), []),
                "value_ints" => Scalar(P.TensorProto.Types.DataType.Int64, t => t.Int64Data.AddRange(attribute.Ints), [attribute.Ints.Count]),
                _ => null,
            };
            if (tensor is not null)
            {
                return tensor;
            }
        }

        return null;

        P.TensorProto Scalar(P.TensorProto.Types.DataType type, Action<P.TensorProto> fill, long[] dims)
        {
            var tensor = new P.TensorProto { Name = node.Output[0], DataType = (int)type };
            tensor.Dims.AddRange(dims);
            fill(tensor);
            return tensor;
        }
    }

    /// <summary>
    /// Folds an inference-mode BatchNormalization into the Conv before it: W' = W * g / sqrt(v + eps)
    /// per output channel, b' = (b - m) * g / sqrt(v + eps) + beta (the BatchNormalization formula of the
    /// ONNX operator docs applied to the Conv output).
    /// </summary>
    private bool TryFoldBatchNorm(LayerGroup group, float[] weight, long[] shape, Dictionary<string, int> readers)
    {
        if (group.Consumers.Count != 1)
        {
            return false;
        }

        var (conv, scope, source) = (group.Consumers[0].Node, group.Consumers[0].Scope, group.Consumers[0].Source);
        if (conv.OpType != "Conv" || conv.Output.Count == 0 || shape.Length < 1)
        {
            return false;
        }

        var convOut = conv.Output[0];
        var bn = scope.Graph.Node.FirstOrDefault(n => n.OpType == "BatchNormalization" && n.Input.Count >= 5 && n.Input[0] == convOut);
        if (bn is null)
        {
            return false;
        }

        var convLabel = scope.Prefix + conv.Name;
        var bnLabel = scope.Prefix + bn.Name;
        if (readers.GetValueOrDefault(convOut) != 1)
        {
            notes.Add($"BatchNormalization '{bnLabel}' not folded: the output of Conv '{convLabel}' is also read elsewhere.");
            return false;
        }

        if (ModelChecks.Attribute(bn, "training_mode")?.I == 1 || bn.Output.Skip(1).Any(o => o.Length > 0 && readers.GetValueOrDefault(o) > 0))
        {
            notes.Add($"BatchNormalization '{bnLabel}' not folded: it runs in training mode.");
            return false;
        }

        if (source.Chain.Any(n => readers.GetValueOrDefault(n) != 1))
        {
            notes.Add($"BatchNormalization '{bnLabel}' not folded: the weight of Conv '{convLabel}' is also read by other nodes.");
            return false;
        }

        var channels = checked((int)shape[0]);
        var parameters = new float[4][];
        for (var i = 0; i < 4; i++)
        {
            var resolved = Resolve(bn.Input[i + 1], scope).Source;
            if (resolved is null || !TensorCodec.IsCastableFloat(resolved.Tensor.DataType) || TensorCodec.ElementCount(resolved.Tensor.Dims) != channels)
            {
                notes.Add($"BatchNormalization '{bnLabel}' not folded: its parameter '{bn.Input[i + 1]}' is not a constant with one value per channel.");
                return false;
            }

            parameters[i] = resolved.ReadFloats();
        }

        float[] bias;
        var hasBias = conv.Input.Count >= 3 && conv.Input[2].Length > 0;
        if (hasBias)
        {
            var resolved = Resolve(conv.Input[2], scope).Source;
            if (resolved is null || !TensorCodec.IsCastableFloat(resolved.Tensor.DataType) || TensorCodec.ElementCount(resolved.Tensor.Dims) != channels)
            {
                notes.Add($"BatchNormalization '{bnLabel}' not folded: the bias of Conv '{convLabel}' is not a constant.");
                return false;
            }

            bias = resolved.ReadFloats();
            deadCandidates.Add(conv.Input[2]);
        }
        else
        {
            bias = new float[channels];
        }

        var epsilon = ModelChecks.Attribute(bn, "epsilon")?.F ?? 1e-5f;
        var (gamma, beta, mean, variance) = (parameters[0], parameters[1], parameters[2], parameters[3]);
        var perChannel = weight.Length / channels;
        for (var c = 0; c < channels; c++)
        {
            // Double keeps the fold from adding its own rounding on top of FP32 storage.
            var factor = gamma[c] / Math.Sqrt((double)variance[c] + epsilon);
            var row = weight.AsSpan(c * perChannel, perChannel);
            for (var j = 0; j < row.Length; j++)
            {
                row[j] = (float)(row[j] * factor);
            }

            bias[c] = (float)(((double)bias[c] - mean[c]) * factor + beta[c]);
        }

        var biasName = UniqueName(conv.Name + "_folded_bias");
        main.Graph.Initializer.Add(TensorCodec.FromFloats(biasName, [channels], bias));
        if (hasBias)
        {
            conv.Input[2] = biasName;
        }
        else
        {
            conv.Input.Add(biasName);
        }

        foreach (var parameter in bn.Input.Skip(1))
        {
            deadCandidates.Add(parameter);
        }

        conv.Output[0] = bn.Output[0];
        scope.Graph.Node.Remove(bn);
        RemoveValueInfo(scope.Graph, convOut);
        notes.Add($"Folded BatchNormalization '{bnLabel}' into Conv '{convLabel}'.");
        return true;
    }

    /// <summary>Makes the weight one FP32 initializer of the main graph, named as the first consumer reads it.</summary>
    private string Hoist(LayerGroup group, float[] values, long[] shape)
    {
        var first = group.Consumers[0];
        var weightName = first.Node.Input[first.Index];
        var owner = first.Scope.Find(weightName)!;
        RemoveDefinition(owner, weightName);
        if (owner != main && main.Defines(weightName))
        {
            // A subgraph value that shadows a main-graph name cannot move out under the same name.
            weightName = UniqueName(weightName);
        }

        main.Graph.Initializer.Add(TensorCodec.FromFloats(weightName, shape, values));
        main.Initializers[weightName] = main.Graph.Initializer[^1];
        foreach (var consumer in group.Consumers)
        {
            consumer.Node.Input[consumer.Index] = weightName;
            foreach (var name in consumer.Source.Chain)
            {
                deadCandidates.Add(name);
            }
        }

        deadCandidates.Remove(weightName);
        return weightName;
    }

    private void RemoveDefinition(GraphScope owner, string name)
    {
        if (owner.Initializers.Remove(name, out var tensor))
        {
            owner.Graph.Initializer.Remove(tensor);
            var input = owner.Graph.Input.FirstOrDefault(i => i.Name == name);
            if (input is not null)
            {
                owner.Graph.Input.Remove(input);
            }
        }
        else if (owner.Producers.Remove(name, out var producer))
        {
            owner.Graph.Node.Remove(producer);
            foreach (var input in producer.Input)
            {
                deadCandidates.Add(input);
            }
        }

        RemoveValueInfo(owner.Graph, name);
    }

    /// <summary>Drops the Constant, Identity and Cast nodes (and initializers) that only fed weights folded or hoisted above.</summary>
    private void RemoveDeadConstants()
    {
        var readers = CountReaders();
        var queue = new Queue<string>(deadCandidates);
        while (queue.TryDequeue(out var name))
        {
            if (name.Length == 0 || readers.GetValueOrDefault(name) > 0)
            {
                continue;
            }

            foreach (var graph in ModelChecks.AllGraphs(model.Graph))
            {
                var tensor = graph.Initializer.FirstOrDefault(t => t.Name == name);
                if (tensor is not null)
                {
                    graph.Initializer.Remove(tensor);
                    var input = graph.Input.FirstOrDefault(i => i.Name == name);
                    if (input is not null)
                    {
                        graph.Input.Remove(input);
                    }
                }

                var producer = graph.Node.FirstOrDefault(n => n.Output.Count == 1 && n.Output[0] == name && n.OpType is "Constant" or "Identity" or "Cast");
                if (producer is not null)
                {
                    graph.Node.Remove(producer);
                    foreach (var input in producer.Input)
                    {
                        readers[input] = readers.GetValueOrDefault(input) - 1;
                        queue.Enqueue(input);
                    }
                }

                RemoveValueInfo(graph, name);
            }
        }
    }

    private static void RemoveValueInfo(P.GraphProto graph, string name)
    {
        var info = graph.ValueInfo.FirstOrDefault(v => v.Name == name);
        if (info is not null)
        {
            graph.ValueInfo.Remove(info);
        }
    }

    /// <summary>How many node inputs (in any graph) and graph outputs read each value name.</summary>
    private Dictionary<string, int> CountReaders()
    {
        var readers = new Dictionary<string, int>(StringComparer.Ordinal);
        foreach (var graph in ModelChecks.AllGraphs(model.Graph))
        {
            foreach (var node in graph.Node)
            {
                foreach (var input in node.Input)
                {
                    readers[input] = readers.GetValueOrDefault(input) + 1;
                }
            }

            foreach (var output in graph.Output)
            {
                readers[output.Name] = readers.GetValueOrDefault(output.Name) + 1;
            }
        }

        return readers;
    }

    /// <summary>Gives unnamed (or duplicate-named) nodes a name from their op and position, so layer names stay stable across uploads.</summary>
    private void NameNodes(P.GraphProto graph)
    {
        var taken = new HashSet<string>(StringComparer.Ordinal);
        for (var i = 0; i < graph.Node.Count; i++)
        {
            var node = graph.Node[i];
            if (node.Name.Length == 0 || !taken.Add(node.Name))
            {
                var candidate = $"{node.OpType}_{i.ToString(CultureInfo.InvariantCulture)}";
                for (var k = 1; !taken.Add(candidate); k++)
                {
                    candidate = $"{node.OpType}_{i.ToString(CultureInfo.InvariantCulture)}_{k.ToString(CultureInfo.InvariantCulture)}";
                }

                node.Name = candidate;
            }

            foreach (var attribute in node.Attribute)
            {
                if (attribute.G is not null)
                {
                    NameNodes(attribute.G);
                }

                foreach (var g in attribute.Graphs)
                {
                    NameNodes(g);
                }
            }
        }
    }

    private GraphScope BuildScopes(P.GraphProto graph, GraphScope? parent, string prefix)
    {
        var scope = new GraphScope(graph, parent, prefix);
        foreach (var name in scope.Initializers.Keys.Concat(scope.Inputs).Concat(scope.Producers.Keys))
        {
            usedNames.Add(name);
        }

        foreach (var node in graph.Node)
        {
            nodes.Add((node, scope));
            foreach (var attribute in node.Attribute)
            {
                if (attribute.G is not null)
                {
                    BuildScopes(attribute.G, scope, $"{prefix}{node.Name}/{attribute.Name}/");
                }

                for (var i = 0; i < attribute.Graphs.Count; i++)
                {
                    BuildScopes(attribute.Graphs[i], scope, $"{prefix}{node.Name}/{attribute.Name}_{i.ToString(CultureInfo.InvariantCulture)}/");
                }
            }
        }

        return scope;
    }

    private void ValidateDefinitions()
    {
        foreach (var (node, scope) in nodes)
        {
            foreach (var input in node.Input)
            {
                if (input.Length > 0 && scope.Find(input) is null)
                {
                    throw new EngineException(
                        "model-invalid",
                        $"The model is invalid: node '{scope.Prefix}{node.Name}' reads '{input}', which nothing in the model defines; re-export the model.");
                }
            }
        }

        foreach (var output in model.Graph.Output)
        {
            if (!main.Defines(output.Name))
            {
                throw new EngineException(
                    "model-invalid",
                    $"The model is invalid: graph output '{output.Name}' is not produced by any node; re-export the model.");
            }
        }
    }

    private string UniqueName(string stem)
    {
        var name = stem;
        for (var k = 1; !usedNames.Add(name); k++)
        {
            name = $"{stem}_{k.ToString(CultureInfo.InvariantCulture)}";
        }

        return name;
    }

    private sealed class LayerGroup(WeightSource source)
    {
        public WeightSource Source { get; } = source;

        public List<LayerConsumer> Consumers { get; } = [];
    }

    /// <summary>One node input that reads a layer's weight: the weight sits at input <see cref="Index"/>, in role <see cref="Role"/> ("W", "R", or null).</summary>
    private sealed record LayerConsumer(P.NodeProto Node, GraphScope Scope, WeightSource Source, int Index, string? Role);
}
