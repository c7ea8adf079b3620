using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;
using Google.Protobuf;
using Microsoft.ML.OnnxRuntime;
using Microsoft.ML.OnnxRuntime.Tensors;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Gathers the input moments of every layer compensated rounding and bias correction can use, in one run of the FP32
/// model over the calibration set with the layers' input tensors as extra outputs. Only Σ x and Σ x xᵀ are kept per
/// layer (see <see cref="InputMoments"/>), never the activations, so memory is bounded by the layers' widths.
/// </summary>
public static class LayerInputCollector
{
    /// <summary>
    /// Most products x_i x_j a layer adds per batch (vectors x columns²). Beyond it, every k-th input vector is used, k
    /// chosen to fit: a bound on time of our own, not from the papers; an evenly spaced subset keeps the moments unbiased
    /// for the positions it covers.
    /// </summary>
    public const long MaxProductsPerBatch = 1L << 28;

    /// <summary>Widest input vector whose second moments are gathered (Columns² doubles each); wider layers stay at nearest.</summary>
    public const int MaxColumns = 4096;

    /// <summary>
    /// The inputs of the <paramref name="layers"/> that can use them, by layer name (layers without a linear input site,
    /// wider than <see cref="MaxColumns"/> or past <paramref name="maxBytes"/> in model order are left out). Without
    /// <paramref name="secondMoments"/> only Σ x is gathered (bias correction without compensated rounding): no width limit,
    /// Columns doubles per group, and no products to sum.
    /// </summary>
    public static IReadOnlyDictionary<string, LayerInputs> Collect(
        OnnxModel model, CalibrationSet data, IReadOnlyList<WeightLayer> layers, int maxBatch, long maxBytes, CancellationToken cancellationToken = default, bool secondMoments = true)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(data);
        var wanted = Chosen(model, layers, maxBytes, secondMoments)
            .Select(c => (c.Layer, c.Sites, Inputs: new LayerInputs(c.Sites[0].Layout, new InputMoments(c.Sites[0].Layout.Groups, c.Sites[0].Layout.Columns, secondMoments))))
            .ToList();
        if (wanted.Count == 0)
        {
            return new Dictionary<string, LayerInputs>(StringComparer.Ordinal);
        }

        var graphInputs = model.Inputs.Select(i => i.Name).ToHashSet(StringComparer.Ordinal);
        var tensors = wanted.SelectMany(w => w.Sites).Select(s => s.Tensor).Distinct(StringComparer.Ordinal).ToList();
        var tapped = tensors.Where(t => !graphInputs.Contains(t)).ToList();
        var plan = BatchPlan.For(data, maxBatch);
        using var options = new SessionOptions { GraphOptimizationLevel = GraphOptimizationLevel.ORT_ENABLE_ALL };
        using var session = new InferenceSession(new GraphSlicer(model.Proto).WithExtraOutputs(tapped).ToByteArray(), options);
        using var runOptions = new RunOptions();
        for (var b = 0; b < plan.BatchCount; b++)
        {
            cancellationToken.ThrowIfCancellationRequested();
            var (start, count) = plan.Batch(b);
            var feeds = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
            try
            {
                for (var i = 0; i < model.Inputs.Count; i++)
                {
                    feeds[model.Inputs[i].Name] = OrtTensors.SliceSamples(data.Inputs[i], data.SampleAxes[i], start, count, plan.RowsFed(count));
                }

                // ONNX Runtime runs nothing without an output: when every layer reads a graph input, ask for a model output.
                using var results = session.Run(runOptions, feeds.Keys.ToList(), feeds.Values.ToList(), tapped.Count > 0 ? tapped : [session.OutputNames[0]]);
                foreach (var (layer, sites, inputs) in wanted)
                {
                    foreach (var site in sites)
                    {
                        var index = tapped.IndexOf(site.Tensor);
                        var value = index >= 0 ? results[index] : feeds[site.Tensor];
                        var info = value.GetTensorTypeAndShape();
                        if (info.ElementDataType != TensorElementType.Float)
                        {
                            continue;
                        }

                        Accumulate(site, value.GetTensorDataAsSpan<float>(), info.Shape, inputs.Moments);
                    }
                }
            }
            finally
            {
                foreach (var value in feeds.Values)
                {
                    value.Dispose();
                }
            }
        }

        return wanted.Where(w => Enumerable.Range(0, w.Inputs.Moments.Groups).All(g => w.Inputs.Moments.Count(g) > 0))
            .ToDictionary(w => w.Layer.Name, w => w.Inputs, StringComparer.Ordinal);
    }

    /// <summary>
    /// Bytes the moments <see cref="Collect"/> gathers for these layers take (Σ x x^T and Σ x per group, in double), known
    /// from the graph alone, for estimating a search's memory before it runs.
    /// </summary>
    public static long MomentBytes(OnnxModel model, IReadOnlyList<WeightLayer> layers, long maxBytes, bool secondMoments = true)
    {
        ArgumentNullException.ThrowIfNull(model);
        return Chosen(model, layers, maxBytes, secondMoments).Sum(c => c.Bytes);
    }

    /// <summary>The layers whose moments are gathered, in model order, while they fit <paramref name="maxBytes"/>.</summary>
    private static List<(WeightLayer Layer, IReadOnlyList<LinearInputSite> Sites, long Bytes)> Chosen(OnnxModel model, IReadOnlyList<WeightLayer> layers, long maxBytes, bool secondMoments)
    {
        var chosen = new List<(WeightLayer, IReadOnlyList<LinearInputSite>, long)>();
        long bytes = 0;
        foreach (var layer in layers.Where(LinearInputSite.Applies))
        {
            if (LinearInputSite.Of(layer, model.Proto.Graph) is not { } sites)
            {
                continue;
            }

            var layout = sites[0].Layout;
            var size = InputMoments.BytesFor(layout.Groups, layout.Columns, secondMoments);
            if ((secondMoments && layout.Columns > MaxColumns) || bytes + size > maxBytes)
            {
                continue;
            }

            bytes += size;
            chosen.Add((layer, sites, size));
        }

        return chosen;
    }

    /// <summary>Adds one batch of a site's input tensor to the layer's moments.</summary>
    internal static void Accumulate(LinearInputSite site, ReadOnlySpan<float> values, long[] shape, InputMoments moments)
    {
        const int Chunk = 1024;
        var columns = moments.Columns;
        long vectors;
        if (site.Conv is { } conv)
        {
            if (shape.Length is not (3 or 4) || shape[1] != (long)conv.Group * (columns / (conv.KernelHeight * conv.KernelWidth)))
            {
                return;
            }

            vectors = conv.PatchCount(shape);
        }
        else
        {
            if (shape.Length == 0 || shape[site.Transposed ? 0 : ^1] != columns)
            {
                return;
            }

            vectors = values.Length / columns;
        }

        var step = Math.Max(1L, (long)Math.Ceiling(vectors * (double)columns * (moments.HasSecondMoments ? columns : 1) / MaxProductsPerBatch));
        var block = new float[columns * Chunk];
        var picked = new long[Chunk];
        for (long next = 0; next < vectors;)
        {
            var count = 0;
            for (; count < Chunk && next < vectors; count++, next += step)
            {
                picked[count] = next;
            }

            for (var g = 0; g < moments.Groups; g++)
            {
                var destination = block.AsSpan(0, columns * count);
                if (site.Conv is { } geometry)
                {
                    if (step == 1)
                    {
                        geometry.Patches(values, shape, g, picked[0], count, destination);
                    }
                    else
                    {
                        var single = new float[columns];
                        for (var v = 0; v < count; v++)
                        {
                            geometry.Patches(values, shape, g, picked[v], 1, single);
                            for (var c = 0; c < columns; c++)
                            {
                                destination[(c * count) + v] = single[c];
                            }
                        }
                    }
                }
                else
                {
                    // Rows of [..., K] (or, transposed, columns of [K, M]).
                    var stride = site.Transposed ? vectors : 1;
                    var spacing = site.Transposed ? 1 : columns;
                    for (var v = 0; v < count; v++)
                    {
                        for (var c = 0; c < columns; c++)
                        {
                            destination[(c * count) + v] = values[(int)((picked[v] * spacing) + (c * stride))];
                        }
                    }
                }

                moments.Add(g, destination, count, count);
            }
        }
    }
}
