using System.Globalization;
using Google.Protobuf;
using P = global::Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Raises a model from its standard opset to a later one, rewriting every node whose operator changed
/// signature or meaning in between so the raised model computes what the original computed. The
/// rules follow the ONNX operator changelog (https://github.com/onnx/onnx/blob/main/docs/Changelog.md);
/// each is named at its rewrite with the version that introduced the change. Operators that did not
/// change keep their node untouched (<see cref="OperatorHistory.Unchanged"/>); a standard operator this
/// class cannot convert is refused with code <c>opset-raise-unsupported</c>, naming it and its node.
/// Nodes of other domains keep their own opset. If/Loop/Scan bodies are raised like the main graph.
/// </summary>
internal sealed class OpsetRaiser
{
    private const string Code = "opset-raise-unsupported";

    private static readonly HashSet<string> ReducesAt18 = new(StringComparer.Ordinal)
    {
        "ReduceMean", "ReduceMax", "ReduceMin", "ReduceProd", "ReduceL1", "ReduceL2", "ReduceLogSum",
        "ReduceLogSumExp", "ReduceSumSquare",
    };

    private readonly long source;
    private readonly long target;
    private readonly HashSet<string> usedNames = new(StringComparer.Ordinal);
    private readonly List<string> rewritten = [];

    private OpsetRaiser(long source, long target)
    {
        this.source = source;
        this.target = target;
    }

    /// <summary>
    /// Raises <paramref name="model"/> in place to <paramref name="targetOpset"/>; throws
    /// <see cref="EngineException"/> for a target below the model's opset, beyond
    /// <see cref="OperatorHistory.HighestTarget"/>, or for an operator it cannot convert.
    /// </summary>
    public static OpsetRaise Raise(P.ModelProto model, long targetOpset)
    {
        ArgumentNullException.ThrowIfNull(model);
        var source = ModelChecks.DefaultOpset(model);
        if (targetOpset < source)
        {
            throw new EngineException(
                "opset-raise-lower",
                $"The target opset {targetOpset} is below the model's opset {source}; an opset can only be raised. Give {source} to {OperatorHistory.HighestTarget}, or leave the target out.");
        }

        if (targetOpset > OperatorHistory.HighestTarget)
        {
            throw new EngineException(
                "opset-raise-target-unsupported",
                $"The target opset {targetOpset} is beyond opset {OperatorHistory.HighestTarget}, the newest one the raise covers; give {source} to {OperatorHistory.HighestTarget}.");
        }

        if (targetOpset == source)
        {
            return new OpsetRaise(source, targetOpset, []);
        }

        if (source < OperatorHistory.LowestSource)
        {
            throw new EngineException(
                "opset-raise-source-unsupported",
                $"The model uses opset {source}; raising starts from opset {OperatorHistory.LowestSource} or later. Export the model at opset {OperatorHistory.LowestSource} or later.");
        }

        if (model.Functions.Count > 0)
        {
            throw new EngineException(
                Code,
                $"The model defines local functions ('{model.Functions[0].Name}'), whose bodies keep their own opset; the raise does not convert them. Export the model without local functions.");
        }

        var raiser = new OpsetRaiser(source, targetOpset);
        foreach (var graph in ModelChecks.AllGraphs(model.Graph))
        {
            raiser.CollectNames(graph);
        }

        raiser.RaiseGraph(model.Graph, new ValueTypes(null));
        foreach (var import in model.OpsetImport.Where(i => i.Domain is "" or "ai.onnx"))
        {
            import.Version = targetOpset;
        }

        model.IrVersion = Math.Max(model.IrVersion, OperatorHistory.MinimumIrVersion(targetOpset));
        return new OpsetRaise(source, targetOpset, raiser.rewritten);
    }

    private static P.AttributeProto? TakeAttribute(P.NodeProto node, string name)
    {
        var attribute = ModelChecks.Attribute(node, name);
        if (attribute is not null)
        {
            node.Attribute.Remove(attribute);
        }

        return attribute;
    }

    private static P.AttributeProto StringAttribute(string name, string value) =>
        new() { Name = name, Type = P.AttributeProto.Types.AttributeType.String, S = ByteString.CopyFromUtf8(value) };

    private static P.AttributeProto IntAttribute(string name, long value) =>
        new() { Name = name, Type = P.AttributeProto.Types.AttributeType.Int, I = value };

    private EngineException Refuse(P.NodeProto node, string why) =>
        new(Code, $"Cannot raise {node.OpType} node '{ModelChecks.Label(node)}' from opset {source} to {target}: {why}");

    private bool Crosses(long version) => source < version && version <= target;

    private void CollectNames(P.GraphProto graph)
    {
        usedNames.UnionWith(graph.Input.Select(i => i.Name));
        usedNames.UnionWith(graph.Output.Select(o => o.Name));
        usedNames.UnionWith(graph.Initializer.Select(t => t.Name));
        usedNames.UnionWith(graph.ValueInfo.Select(v => v.Name));
        foreach (var node in graph.Node)
        {
            usedNames.UnionWith(node.Output);
            usedNames.Add(node.Name);
        }
    }

    private string Fresh(P.NodeProto node, string what)
    {
        var stem = $"opset_raise/{ModelChecks.Label(node)}/{what}";
        var name = stem;
        for (var i = 1; !usedNames.Add(name); i++)
        {
            name = string.Create(CultureInfo.InvariantCulture, $"{stem}_{i}");
        }

        return name;
    }

    private void RaiseGraph(P.GraphProto graph, ValueTypes outer)
    {
        var types = new ValueTypes(outer);
        types.AddGraph(graph);
        var result = new List<P.NodeProto>(graph.Node.Count);
        foreach (var node in graph.Node)
        {
            foreach (var attribute in node.Attribute)
            {
                if (attribute.G is not null)
                {
                    RaiseGraph(attribute.G, types);
                }

                foreach (var body in attribute.Graphs)
                {
                    RaiseGraph(body, types);
                }
            }

            if (node.Domain is "" or "ai.onnx")
            {
                Convert(node, types, result);
            }
            else
            {
                result.Add(node);
            }
        }

        graph.Node.Clear();
        graph.Node.AddRange(result);
    }

    /// <summary>Appends the node, rewritten if its operator changed between the two opsets, to <paramref name="output"/>.</summary>
    private void Convert(P.NodeProto node, ValueTypes types, List<P.NodeProto> output)
    {
        var before = node.Clone();
        var emit = new NodeEmitter(this, node, output);
        switch (node.OpType)
        {
            case "Clip":
                // Clip-11: min and max moved from attributes to optional inputs of the input's type.
                if (Crosses(11))
                {
                    var type = types.ElementType(node.Input[0]);
                    var min = TakeAttribute(node, "min");
                    var max = TakeAttribute(node, "max");
                    var inputs = new List<string> { node.Input[0], min is null ? "" : emit.Scalar("min", type, min.F), max is null ? "" : emit.Scalar("max", type, max.F) };
                    SetInputs(node, inputs);
                }

                break;
            case "Slice":
                // Slice-10: starts, ends and axes moved from attributes to int64 inputs (steps added, default 1).
                if (Crosses(10))
                {
                    var inputs = new List<string> { node.Input[0] };
                    foreach (var name in new[] { "starts", "ends", "axes" })
                    {
                        if (TakeAttribute(node, name) is { } attribute)
                        {
                            inputs.Add(emit.Int64s(name, attribute.Ints));
                        }
                    }

                    SetInputs(node, inputs);
                }

                break;
            case "TopK":
                // TopK-10: k moved from an attribute to a one-element int64 input.
                if (Crosses(10))
                {
                    var k = TakeAttribute(node, "k") ?? throw Refuse(node, "it has no 'k' attribute.");
                    SetInputs(node, [node.Input[0], emit.Int64s("k", [k.I])]);
                }

                break;
            case "Pad":
                // Pad-11: pads and the constant value moved from attributes to inputs.
                if (Crosses(11))
                {
                    var pads = TakeAttribute(node, "pads") ?? throw Refuse(node, "it has no 'pads' attribute.");
                    var value = TakeAttribute(node, "value");
                    var inputs = new List<string> { node.Input[0], emit.Int64s("pads", pads.Ints) };
                    if (value is not null && value.F != 0)
                    {
                        inputs.Add(emit.Scalar("value", types.ElementType(node.Input[0]), value.F));
                    }

                    SetInputs(node, inputs);
                }

                break;
            case "Upsample":
                // Upsample was deprecated at opset 10 in favour of Resize, which takes the same (X, scales) at 10.
                node.OpType = "Resize";
                if (ModelChecks.Attribute(node, "mode") is { } mode && mode.S.ToStringUtf8() == "bilinear")
                {
                    mode.S = ByteString.CopyFromUtf8("linear");
                }

                if (target >= 11)
                {
                    ResizeFrom10(node, types, emit);
                }

                break;
            case "Resize":
                if (Crosses(11))
                {
                    ResizeFrom10(node, types, emit);
                }

                break;
            case "Softmax":
            case "LogSoftmax":
            case "Hardmax":
                if (Crosses(13))
                {
                    SingleAxis(node, types, emit);
                    return;
                }

                break;
            case "Squeeze":
            case "Unsqueeze":
                // Squeeze-13 / Unsqueeze-13: axes moved from an attribute to an int64 input.
                if (Crosses(13))
                {
                    AxesToInput(node, emit);
                }

                break;
            case "ReduceSum":
                // ReduceSum-13: axes moved to an input (noop_with_empty_axes added, default 0 = reduce all).
                if (Crosses(13))
                {
                    AxesToInput(node, emit);
                }

                break;
            case var reduce when ReducesAt18.Contains(reduce):
                // ReduceMean-18 and its siblings: axes moved to an input, as ReduceSum did at 13.
                if (Crosses(18))
                {
                    AxesToInput(node, emit);
                }

                break;
            case "Split":
                Split(node, emit);
                break;
            case "Dropout":
                // Dropout-10: the mask output became bool (it had the data's type); Dropout-12: ratio became an input.
                if (Crosses(10) && node.Output.Count > 1 && node.Output[1].Length > 0)
                {
                    throw Refuse(node, "its mask output changes element type at opset 10 (to bool); remove the mask output or export at opset 10 or later.");
                }

                if (Crosses(12) && TakeAttribute(node, "ratio") is { } ratio)
                {
                    SetInputs(node, [node.Input[0], emit.Scalar("ratio", P.TensorProto.Types.DataType.Float, ratio.F)]);
                }

                break;
            case "BatchNormalization":
                // BatchNormalization-14: training outputs became (running_mean, running_var) behind training_mode.
                if (Crosses(14) && node.Output.Skip(1).Any(o => o.Length > 0))
                {
                    throw Refuse(node, "it has training-mode outputs (mean, var, saved statistics), whose meaning changed at opset 14; export the model in inference mode.");
                }

                break;
            case "Scatter":
                // Scatter was deprecated at opset 11 for ScatterElements, with the same inputs and axis.
                if (target >= 11)
                {
                    node.OpType = "ScatterElements";
                }

                break;
            case "RoiAlign":
                // RoiAlign-16 added coordinate_transformation_mode with default half_pixel; before, it was output_half_pixel.
                if (Crosses(16) && ModelChecks.Attribute(node, "coordinate_transformation_mode") is null)
                {
                    node.Attribute.Add(StringAttribute("coordinate_transformation_mode", "output_half_pixel"));
                }

                break;
            case "GridSample":
                // GridSample-20 renamed its modes: bilinear -> linear, bicubic -> cubic.
                if (Crosses(20) && ModelChecks.Attribute(node, "mode") is { } gridMode)
                {
                    var renamed = gridMode.S.ToStringUtf8() switch { "bilinear" => "linear", "bicubic" => "cubic", var same => same };
                    gridMode.S = ByteString.CopyFromUtf8(renamed);
                }

                break;
            case "GroupNormalization":
                if (Crosses(21))
                {
                    throw Refuse(node, "its scale and bias change from one value per group to one per channel at opset 21, which needs the channel count; this is not converted.");
                }

                break;
            case "DFT":
                if (Crosses(20))
                {
                    throw Refuse(node, "its axis moves from an attribute to an input with another default at opset 20; this is not converted.");
                }

                break;
            default:
                if (!OperatorHistory.Unchanged.Contains(node.OpType))
                {
                    throw Refuse(node, $"the raise does not know how {node.OpType} changed between these opsets. Export the model at the opset you need instead, or leave the target opset out.");
                }

                break;
        }

        emit.Add(node);
        if (!node.Equals(before))
        {
            rewritten.Add($"{before.OpType} '{ModelChecks.Label(before)}': {Describe(before)} -> {Describe(node)}");
        }
    }

    private static string Describe(P.NodeProto node) =>
        $"{node.OpType}({string.Join(", ", node.Input)})" + (node.Attribute.Count == 0 ? "" : $" [{string.Join(", ", node.Attribute.Select(a => a.Name))}]");

    private static void SetInputs(P.NodeProto node, List<string> inputs)
    {
        while (inputs.Count > 1 && inputs[^1].Length == 0)
        {
            inputs.RemoveAt(inputs.Count - 1);
        }

        node.Input.Clear();
        node.Input.AddRange(inputs);
    }

    private static void AxesToInput(P.NodeProto node, NodeEmitter emit)
    {
        if (TakeAttribute(node, "axes") is { } axes && axes.Ints.Count > 0)
        {
            SetInputs(node, [node.Input[0], emit.Int64s("axes", axes.Ints)]);
        }
    }

    /// <summary>
    /// Resize-11 added roi, coordinate_transformation_mode (default half_pixel) and nearest_mode (default
    /// round_prefer_floor). Resize-10 and Upsample mapped output to input coordinates as x_out / scale
    /// ("asymmetric") and, for nearest, took the floor when enlarging and the ceiling when shrinking
    /// (ONNX Runtime's Resize-10 kernel); both are written out explicitly.
    /// </summary>
    private void ResizeFrom10(P.NodeProto node, ValueTypes types, NodeEmitter emit)
    {
        var mode = ModelChecks.Attribute(node, "mode")?.S.ToStringUtf8() ?? "nearest";
        node.Attribute.Add(StringAttribute("coordinate_transformation_mode", "asymmetric"));
        if (mode == "nearest")
        {
            var scales = types.Constant(node.Input[1])
                ?? throw Refuse(node, "its scales are computed at run time, so whether each axis enlarges (floor) or shrinks (ceiling) under the old nearest rounding is unknown; export the model at opset 11 or later.");
            var values = TensorCodec.ToFloats(scales);
            var rounding = values.All(s => s >= 1) ? "floor" : values.All(s => s <= 1) ? "ceil" : null;
            node.Attribute.Add(StringAttribute("nearest_mode", rounding ?? throw Refuse(node, "its scales enlarge some axes and shrink others, which the old nearest rounding treats differently per axis; this is not converted.")));
        }

        // roi only matters for tf_crop_and_resize; it is optional from Resize-13 on.
        var roi = target >= 13 ? "" : emit.Floats("roi", []);
        SetInputs(node, [node.Input[0], roi, node.Input[1]]);
    }

    /// <summary>
    /// Softmax-13 (and LogSoftmax-13, Hardmax-13) normalise along one axis; before, the input was coerced
    /// to 2-D [prod(d0..d(axis-1)), prod(d(axis)..)] and normalised along the second. The two agree when the
    /// axis is the last one; otherwise the old form is written out as Flatten, the operator on axis 1, and
    /// a Reshape back to the input's shape.
    /// </summary>
    private void SingleAxis(P.NodeProto node, ValueTypes types, NodeEmitter emit)
    {
        var before = node.Clone();
        var axis = ModelChecks.Attribute(node, "axis")?.I ?? 1;
        // The output has the input's shape, so a declared output (often the graph's own output) gives the rank too.
        if ((types.Rank(node.Input[0]) ?? types.Rank(node.Output[0])) is { } rank && (axis == rank - 1 || axis == -1))
        {
            TakeAttribute(node, "axis");
            node.Attribute.Add(IntAttribute("axis", -1));
            emit.Add(node);
            rewritten.Add($"{node.OpType} '{ModelChecks.Label(node)}': axis {axis} is the last of rank {rank}, kept as axis -1");
            return;
        }

        var input = node.Input[0];
        var output = node.Output[0];
        var flat = Fresh(node, "flat");
        var normalised = Fresh(node, "normalised");
        var shape = Fresh(node, "shape");
        emit.Add(new P.NodeProto { OpType = "Flatten", Name = Fresh(node, "Flatten"), Input = { input }, Output = { flat }, Attribute = { IntAttribute("axis", axis) } });
        TakeAttribute(node, "axis");
        node.Attribute.Add(IntAttribute("axis", 1));
        node.Input[0] = flat;
        node.Output[0] = normalised;
        emit.Add(node);
        emit.Add(new P.NodeProto { OpType = "Shape", Name = Fresh(node, "Shape"), Input = { input }, Output = { shape } });
        emit.Add(new P.NodeProto { OpType = "Reshape", Name = Fresh(node, "Reshape"), Input = { normalised, shape }, Output = { output } });
        rewritten.Add($"{before.OpType} '{ModelChecks.Label(before)}': axis {axis} on coerced 2-D input -> Flatten(axis={axis}), {before.OpType}(axis=1), Reshape to the input's shape");
    }

    /// <summary>Split-13 moved split from an attribute to an input; Split-18 needs num_outputs when split is not given.</summary>
    private void Split(P.NodeProto node, NodeEmitter emit)
    {
        if (Crosses(13) && TakeAttribute(node, "split") is { } split && split.Ints.Count > 0)
        {
            SetInputs(node, [node.Input[0], emit.Int64s("split", split.Ints)]);
        }

        var hasSplitInput = node.Input.Count > 1 && node.Input[1].Length > 0;
        if (Crosses(18) && !hasSplitInput && ModelChecks.Attribute(node, "num_outputs") is null)
        {
            node.Attribute.Add(IntAttribute("num_outputs", node.Output.Count));
        }
    }

    /// <summary>Adds nodes to a graph's new node list, with Constant nodes for values that moved from attributes to inputs.</summary>
    private sealed class NodeEmitter(OpsetRaiser raiser, P.NodeProto node, List<P.NodeProto> output)
    {
        public void Add(P.NodeProto added) => output.Add(added);

        public string Int64s(string what, IEnumerable<long> values)
        {
            var tensor = new P.TensorProto { DataType = (int)P.TensorProto.Types.DataType.Int64 };
            tensor.Int64Data.AddRange(values);
            tensor.Dims.Add(tensor.Int64Data.Count);
            return Constant(what, tensor);
        }

        public string Floats(string what, float[] values)
        {
            var tensor = new P.TensorProto { DataType = (int)P.TensorProto.Types.DataType.Float };
            tensor.FloatData.AddRange(values);
            tensor.Dims.Add(values.Length);
            return Constant(what, tensor);
        }

        /// <summary>A scalar of the given float type holding <paramref name="value"/> (an FP32 attribute value, converted exactly or rounded once).</summary>
        public string Scalar(string what, P.TensorProto.Types.DataType type, float value)
        {
            var tensor = new P.TensorProto { DataType = (int)type };
            switch (type)
            {
                case P.TensorProto.Types.DataType.Double:
                    tensor.DoubleData.Add(value);
                    break;
                case P.TensorProto.Types.DataType.Float16:
                    tensor.Int32Data.Add(BitConverter.HalfToUInt16Bits((Half)value));
                    break;
                case P.TensorProto.Types.DataType.Float:
                    tensor.FloatData.Add(value);
                    break;
                default:
                    throw raiser.Refuse(node, $"its input has element type {type}, for which the raise cannot write the '{what}' value.");
            }

            return Constant(what, tensor);
        }

        private string Constant(string what, P.TensorProto tensor)
        {
            var name = raiser.Fresh(node, what);
            tensor.Name = name;
            output.Add(new P.NodeProto
            {
                OpType = "Constant",
                Name = raiser.Fresh(node, what + "_constant"),
                Output = { name },
                Attribute = { new P.AttributeProto { Name = "value", Type = P.AttributeProto.Types.AttributeType.Tensor, T = tensor } },
            });
            return name;
        }
    }
}
