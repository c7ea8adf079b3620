using Bitbudget.Search.Quantization;
using Google.Protobuf;
using Onnx;

namespace Bitbudget.Search.Onnx;

/// <summary>
/// Writes the quantized model with integer weights at the model's own opset: each quantized weight becomes an
/// integer initializer with its scale (and, asymmetric, zero point) and standard operators that yield the FP32
/// weight the layer reads (<see cref="WeightStorage"/> decides the form: DequantizeLinear where the opset has it,
/// Cast/Sub/Mul below that). The model's opset is never raised here (raising it changes the meaning of other
/// operators). Widths without their own type (3, 5, 6, 7 bits) are stored in the next wider type with the narrower range.
/// </summary>
public static class QdqExporter
{
    /// <summary>The ONNX Runtime session option that sets how a fused DequantizeLinear+MatMul computes.</summary>
    public const string MatMulAccuracyOption = "session.qdq_matmulnbits_accuracy_level";

    /// <summary>
    /// ONNX Runtime's CPU provider fuses DequantizeLinear+MatMul into its MatMulNBits kernel and by default
    /// computes it with 8-bit activations, which adds error that a weights-only measurement does not see
    /// (observed with Microsoft.ML.OnnxRuntime 1.31; see QdqExporterTests).
    /// </summary>
    public const string MatMulNote =
        "MatMul weights (and Gemm weights read untransposed) are stored behind DequantizeLinear. ONNX Runtime on CPU fuses that pair and, at its default accuracy level, " +
        "also quantizes the MatMul's activations to 8 bits, which adds error beyond what was measured here (weights only). " +
        "To run as measured, set the session option " + MatMulAccuracyOption + "=1; otherwise re-measure with your runtime's settings.";

    /// <summary>
    /// Exports <paramref name="model"/> with each layer stored as <paramref name="assignment"/> says (by layer name;
    /// missing layers stay FP32). With <paramref name="activations"/>, every layer at an integer bit width also
    /// gets QuantizeLinear/DequantizeLinear (uint8, per-tensor) on its input activation; that needs opset 13.
    /// Run unoptimised, such a model reproduces the validation trial exactly; with ONNX Runtime's default
    /// optimisations it stays within a relative MSE of 1e-8 of it (measured 9e-15 on the test MLP; 8-bit weights next to quantized activations are stored as uint8, see below).
    /// Layers set to compensated rounding take their integers from <paramref name="rounder"/>, the trials' own source,
    /// and layers set to bias correction their corrected bias (see <see cref="BiasSite.Export"/>).
    /// </summary>
    public static ExportedModel Export(
        OnnxModel model,
        IReadOnlyDictionary<string, LayerSetting> assignment,
        IReadOnlyList<ActivationQuantization>? activations = null,
        Evaluation.WeightRounder? rounder = null)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(assignment);
        var quantizedActivations = (activations ?? [])
            .Where(a => assignment.TryGetValue(a.Layer, out var s) && BitWidths.IsInteger(s.Bits))
            .ToList();
        if (quantizedActivations.Count > 0 && model.Opset < ActivationQuantization.MinimumOpset)
        {
            throw new EngineException("settings-invalid", ActivationQuantization.OpsetMessage(model.Opset));
        }

        var proto = model.Proto.Clone();
        var graph = proto.Graph;
        var dequantizers = new List<NodeProto>();
        var forms = new HashSet<string>(StringComparer.Ordinal);
        var dequantized = new HashSet<string>(StringComparer.Ordinal);
        foreach (var layer in model.Layers)
        {
            if (!assignment.TryGetValue(layer.Name, out var setting) || setting.Bits == BitWidths.Float32)
            {
                continue;
            }

            var weight = model.GetWeight(layer);
            graph.Initializer.RemoveAt(FindInitializer(graph, layer.WeightName));

            // Old IR versions list initializers among the graph inputs; the weight is now computed, not fed.
            var listed = graph.Input.FirstOrDefault(i => i.Name == layer.WeightName);
            if (listed is not null)
            {
                graph.Input.Remove(listed);
            }

            StoredWeight stored;
            if (setting.Bits == BitWidths.Float16)
            {
                stored = WeightStorage.Half(layer, weight);
            }
            else
            {
                var q = setting.Rounding == RoundingMethod.Nearest
                    ? WeightQuantizer.Quantize(weight, layer.Shape, layer.ChannelAxis, setting)
                    : (rounder ?? throw new InvalidOperationException("Compensated rounding needs the search's weight rounder.")).Quantize(layer, setting);
                if (WeightStorage.StoresUnsigned(setting, model.Opset, quantizedActivations.Any(a => a.Layer == layer.Name)))
                {
                    q = q.ShiftedToUnsigned();
                }

                stored = WeightStorage.Integer(layer, q, model.Opset);
            }

            graph.Initializer.AddRange(stored.Initializers);
            dequantizers.AddRange(stored.Nodes);

            // The corrected bias comes from the rounder too, so the file holds the very bias the trials ran with.
            if (rounder?.CorrectedBias(layer, setting) is { } bias)
            {
                rounder.BiasSites[layer.Name].Export(graph, bias);
            }
            forms.Add(stored.Form);
            if (stored.Form == WeightStorage.DequantizeForm)
            {
                dequantized.Add(layer.WeightName);
            }
        }

        ActivationQdq.Insert(graph, quantizedActivations, switched: false);

        // Inputs are initializers, so the new nodes can lead the topologically sorted node list.
        for (var i = dequantizers.Count - 1; i >= 0; i--)
        {
            graph.Node.Insert(0, dequantizers[i]);
        }

        // ONNX Runtime fuses DequantizeLinear into the MatMul (or untransposed Gemm) that reads it. A table tied to an
        // output MatMul is a Gather layer that a MatMul also reads: look at the readers, not the layer's op.
        var dequantizedMatMul = ModelChecks.AllGraphs(graph).SelectMany(g => g.Node).Any(n => FusedByRuntime(n, dequantized));
        var notes = new List<string>();
        if (forms.Contains(WeightStorage.ScaleMultiplyForm))
        {
            notes.Add(ScaleMultiplyNote(model.Opset));
        }

        if (dequantizedMatMul)
        {
            notes.Add(MatMulNote);
        }

        return new ExportedModel(proto.ToByteArray(), "qdq", model.Opset, notes.Count == 0 ? null : string.Join(" ", notes));
    }

    /// <summary>What the export note says when some weights are dequantized by Cast/Sub/Mul rather than DequantizeLinear.</summary>
    public static string ScaleMultiplyNote(long opset) =>
        $"The model's opset is {opset}, which has no {(opset < WeightStorage.DequantizeOpset ? "DequantizeLinear" : "per-axis DequantizeLinear")}; " +
        "those weights are stored as 8-bit integers and turned into FP32 by Cast, Sub (zero point, asymmetric only) and Mul (scale per channel), " +
        "which gives s (q - z) exactly. The opset was not raised, because other operators change meaning across versions.";

    /// <summary>
    /// Nodes whose DequantizeLinear input ONNX Runtime's CPU provider fuses into a MatMul kernel: MatMul, and Gemm reading
    /// B untransposed, which it rewrites to MatMul (observed with Microsoft.ML.OnnxRuntime 1.31; see WeightStorageTests).
    /// </summary>
    private static bool FusedByRuntime(NodeProto node, IReadOnlySet<string> dequantized) => node.OpType switch
    {
        "MatMul" => node.Input.Any(dequantized.Contains),
        "Gemm" => node.Input.Count > 1 && dequantized.Contains(node.Input[1]) && !node.Attribute.Any(a => a.Name == "transB" && a.I == 1),
        _ => false,
    };

    private static int FindInitializer(GraphProto graph, string name)
    {
        for (var i = 0; i < graph.Initializer.Count; i++)
        {
            if (graph.Initializer[i].Name == name)
            {
                return i;
            }
        }

        throw new InvalidOperationException($"The normalised model has no initializer '{name}'.");
    }
}
