using System.Diagnostics;
using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;
using Google.Protobuf;
using Microsoft.ML.OnnxRuntime;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Measures what quantizing weights does to a model's outputs on a calibration set. One ONNX Runtime
/// session is built per model with every layer weight as a graph input, so a trial only swaps the
/// perturbed weights and runs forward; no session is rebuilt per trial. For a single perturbed layer
/// the session can also run only the graph downstream of that layer, fed from activations cached by
/// the reference run (see <see cref="GraphSlicer"/>), when that is estimated to be cheaper.
/// </summary>
public sealed class TrialSession : IDisposable
{
    private readonly OnnxModel _model;
    private readonly CalibrationSet _data;
    private readonly TrialSessionOptions _options;
    private readonly BatchPlan _plan;
    private readonly InferenceSession _full;
    private readonly RunOptions _runOptions = new();
    private readonly SessionOptions _sessionOptions;
    private readonly Dictionary<string, float[]> _fp32ByLayer;
    private readonly Dictionary<string, OrtValue> _fp32Values;
    private readonly List<Dictionary<string, OrtValue>> _dataFeeds;
    private readonly GraphSlicer _slicer;
    private readonly List<Dictionary<string, OrtValue>>? _cachedActivations;
    private readonly Dictionary<string, (int ElementType, int Rank)> _activationTypes = new(StringComparer.Ordinal);
    private (string Layer, InferenceSession Session)? _suffix;

    private TrialSession(OnnxModel model, CalibrationSet data, TrialSessionOptions options)
    {
        _model = model;
        _data = data;
        _options = options;
        _plan = BatchPlan.For(model.Inputs, data.SampleCount, options.MaxBatch);
        _sessionOptions = new SessionOptions { GraphOptimizationLevel = GraphOptimizationLevel.ORT_ENABLE_ALL };
        if (options.IntraOpThreads is { } threads)
        {
            _sessionOptions.IntraOpNumThreads = threads;
        }

        var weightsAsInputs = global::Onnx.ModelProto.Parser.ParseFrom(model.BuildWeightsAsInputs());
        _slicer = new GraphSlicer(weightsAsInputs);

        var build = Stopwatch.StartNew();
        _full = new InferenceSession(weightsAsInputs.ToByteArray(), _sessionOptions);
        SessionBuildMilliseconds = build.Elapsed.TotalMilliseconds;

        _fp32ByLayer = model.Layers.ToDictionary(l => l.Name, model.GetWeight, StringComparer.Ordinal);
        _fp32Values = model.Layers.ToDictionary(
            l => l.WeightName,
            l => OrtTensors.Wrap(_fp32ByLayer[l.Name], l.Shape.ToArray()),
            StringComparer.Ordinal);
        _dataFeeds = BuildDataFeeds();

        var pass = Stopwatch.StartNew();
        ReferenceOutputs = Run(_full, _full.OutputNames, feedsOverride: null, extraFeeds: null);
        ForwardPassMilliseconds = pass.Elapsed.TotalMilliseconds;
        ReferenceMetrics = OutputComparer.Compare(ReferenceOutputs, ReferenceOutputs, data.Labels);

        if (options.SuffixRuns)
        {
            _cachedActivations = CacheCutActivations();
        }
    }

    /// <summary>Outputs of the FP32 model over the whole calibration set.</summary>
    public IReadOnlyList<OutputTensor> ReferenceOutputs { get; }

    /// <summary>The reference compared with itself: carries the FP32 accuracy against labels.</summary>
    public MetricSet ReferenceMetrics { get; }

    /// <summary>Time ONNX Runtime took to build the weights-as-inputs session, in ms.</summary>
    public double SessionBuildMilliseconds { get; }

    /// <summary>Time of one pass of the FP32 model over the calibration set, in ms.</summary>
    public double ForwardPassMilliseconds { get; }

    /// <summary>True when cut-set activations are cached, so single-layer trials may run a suffix.</summary>
    public bool SuffixAvailable => _cachedActivations is not null;

    /// <summary>Opens a session for <paramref name="model"/> and runs the FP32 reference on <paramref name="data"/>.</summary>
    public static TrialSession Open(OnnxModel model, CalibrationSet data, TrialSessionOptions? options = null)
    {
        try
        {
            return new TrialSession(model, data, options ?? new TrialSessionOptions());
        }
        catch (OnnxRuntimeException e)
        {
            throw new EngineException("model-cannot-run", $"ONNX Runtime cannot run the model on this dataset: {e.Message}", e);
        }
    }

    /// <summary>The weight of <paramref name="layer"/> as <paramref name="setting"/> stores it, back in FP32.</summary>
    public float[] Quantized(WeightLayer layer, LayerSetting setting)
    {
        var fp32 = _fp32ByLayer[layer.Name];
        var result = new float[fp32.Length];
        WeightQuantizer.FakeQuantize(fp32, layer.Shape, layer.ChannelAxis, setting, result);
        return result;
    }

    /// <summary>Measures a whole assignment end to end; layers not named stay FP32.</summary>
    public MetricSet MeasureAssignment(IReadOnlyDictionary<string, LayerSetting> assignment)
    {
        var weights = new Dictionary<string, float[]>(StringComparer.Ordinal);
        foreach (var (name, setting) in assignment)
        {
            if (setting.Bits != BitWidths.Float32)
            {
                weights[name] = Quantized(Layer(name), setting);
            }
        }

        return OutputComparer.Compare(ReferenceOutputs, RunFull(weights), _data.Labels);
    }

    /// <summary>
    /// Measures one layer at one setting with every other layer FP32 (a sensitivity trial). Runs only the
    /// downstream part of the graph when <paramref name="allowSuffix"/> and that is estimated cheaper
    /// for <paramref name="trialsForLayer"/> trials of this layer.
    /// </summary>
    public MetricSet MeasureLayer(WeightLayer layer, LayerSetting setting, int trialsForLayer = 1, bool allowSuffix = true)
    {
        var weight = Quantized(layer, setting);
        var outputs = allowSuffix && PrefersSuffix(layer, trialsForLayer)
            ? RunSuffix(layer, weight)
            : RunFull(new Dictionary<string, float[]>(StringComparer.Ordinal) { [layer.Name] = weight });
        return OutputComparer.Compare(ReferenceOutputs, outputs, _data.Labels);
    }

    /// <summary>Runs the whole model with some layers' weights replaced (by layer name).</summary>
    public IReadOnlyList<OutputTensor> RunFull(IReadOnlyDictionary<string, float[]> weightsByLayer)
    {
        var overrides = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
        try
        {
            foreach (var (name, weight) in weightsByLayer)
            {
                var layer = Layer(name);
                overrides[layer.WeightName] = OrtTensors.Wrap(weight, layer.Shape.ToArray());
            }

            return Run(_full, _full.OutputNames, overrides, extraFeeds: null);
        }
        finally
        {
            foreach (var value in overrides.Values)
            {
                value.Dispose();
            }
        }
    }

    /// <summary>
    /// Whether running the suffix from <paramref name="layer"/> is estimated cheaper than full runs for
    /// <paramref name="trials"/> trials: the nodes skipped (a share of a measured full pass) must repay
    /// building one more session (measured). Node share as a cost proxy is a heuristic.
    /// </summary>
    public bool PrefersSuffix(WeightLayer layer, int trials)
    {
        if (_cachedActivations is null)
        {
            return false;
        }

        var position = _slicer.FirstReader(layer.WeightName);
        if (position <= 0)
        {
            return false;
        }

        var skippedShare = (double)position / _slicer.NodeCount;
        return trials * ForwardPassMilliseconds * skippedShare > SessionBuildMilliseconds;
    }

    /// <summary>Runs only the graph downstream of <paramref name="layer"/>, with its weight replaced.</summary>
    internal IReadOnlyList<OutputTensor> RunSuffix(WeightLayer layer, float[] weight)
    {
        if (_cachedActivations is null)
        {
            throw new InvalidOperationException("Suffix runs are off for this session.");
        }

        var session = SuffixSession(layer);
        using var value = OrtTensors.Wrap(weight, layer.Shape.ToArray());
        var overrides = new Dictionary<string, OrtValue>(StringComparer.Ordinal) { [layer.WeightName] = value };
        var suffixOutputs = Run(session, session.OutputNames, overrides, _cachedActivations);
        var byName = suffixOutputs.ToDictionary(o => o.Name, StringComparer.Ordinal);

        // Outputs made before the cut do not depend on the layer: they are the reference outputs.
        return ReferenceOutputs.Select(r => byName.TryGetValue(r.Name, out var o) ? o : r).ToList();
    }

    public void Dispose()
    {
        _suffix?.Session.Dispose();
        _full.Dispose();
        _runOptions.Dispose();
        _sessionOptions.Dispose();
        foreach (var value in _fp32Values.Values)
        {
            value.Dispose();
        }

        DisposeFeeds(_dataFeeds);
        if (_cachedActivations is not null)
        {
            DisposeFeeds(_cachedActivations);
        }
    }

    private WeightLayer Layer(string name) =>
        _model.Layers.FirstOrDefault(l => l.Name == name)
        ?? throw new EngineException("unknown-layer", $"The model has no layer named '{name}'.");

    private InferenceSession SuffixSession(WeightLayer layer)
    {
        if (_suffix is { } current && current.Layer == layer.Name)
        {
            return current.Session;
        }

        // Sweeps go layer by layer, so one suffix session at a time is enough.
        _suffix?.Session.Dispose();
        _suffix = null;
        var position = _slicer.FirstReader(layer.WeightName);
        var suffix = _slicer.Suffix(position, _activationTypes);
        var session = new InferenceSession(suffix.ToByteArray(), _sessionOptions);
        _suffix = (layer.Name, session);
        return session;
    }

    private List<Dictionary<string, OrtValue>> BuildDataFeeds()
    {
        var feeds = new List<Dictionary<string, OrtValue>>(_plan.BatchCount);
        for (var b = 0; b < _plan.BatchCount; b++)
        {
            var (start, count) = _plan.Batch(b);
            var feed = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
            for (var i = 0; i < _model.Inputs.Count; i++)
            {
                feed[_model.Inputs[i].Name] = OrtTensors.SliceSamples(_data.Inputs[i], start, count, _plan.RowsFed(count));
            }

            feeds.Add(feed);
        }

        return feeds;
    }

    /// <summary>
    /// One run of the model with every cut-set activation any layer needs as an extra output; the
    /// activations are kept per batch. Turns suffix runs off when they would take too much memory.
    /// </summary>
    private List<Dictionary<string, OrtValue>>? CacheCutActivations()
    {
        var taps = new SortedSet<string>(StringComparer.Ordinal);
        foreach (var layer in _model.Layers)
        {
            var position = _slicer.FirstReader(layer.WeightName);
            if (position > 0)
            {
                taps.UnionWith(_slicer.CutSet(position).Where(n => !_slicer.IsGraphInput(n)));
            }
        }

        var cache = new List<Dictionary<string, OrtValue>>();
        if (taps.Count == 0)
        {
            return Enumerable.Range(0, _plan.BatchCount).Select(_ => new Dictionary<string, OrtValue>(StringComparer.Ordinal)).ToList();
        }

        using var session = new InferenceSession(_slicer.WithExtraOutputs(taps).ToByteArray(), _sessionOptions);
        var names = taps.ToList();
        long bytes = 0;
        for (var b = 0; b < _plan.BatchCount; b++)
        {
            var inputs = Feeds(session, b, overrides: null, extraFeeds: null);
            using var results = session.Run(_runOptions, inputs.Keys.ToList(), inputs.Values.ToList(), names);
            var batch = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
            cache.Add(batch);
            for (var i = 0; i < names.Count; i++)
            {
                // Copy out: the values returned by Run die with the results collection.
                var data = OrtTensors.CopyRows(results[i], int.MaxValue, out var shape);
                bytes += Buffer.ByteLength(data);
                batch[names[i]] = OrtTensors.Wrap(data, shape);
                var type = results[i].GetTensorTypeAndShape();
                _activationTypes[names[i]] = ((int)type.ElementDataType, shape.Length);
            }

            if (bytes > _options.MaxCachedActivationBytes)
            {
                DisposeFeeds(cache);
                return null;
            }
        }

        return cache;
    }

    private Dictionary<string, OrtValue> Feeds(
        InferenceSession session,
        int batch,
        IReadOnlyDictionary<string, OrtValue>? overrides,
        IReadOnlyList<Dictionary<string, OrtValue>>? extraFeeds)
    {
        var feeds = new Dictionary<string, OrtValue>(StringComparer.Ordinal);
        foreach (var name in session.InputNames)
        {
            if (overrides is not null && overrides.TryGetValue(name, out var value))
            {
                feeds[name] = value;
            }
            else if (_fp32Values.TryGetValue(name, out value))
            {
                feeds[name] = value;
            }
            else if (_dataFeeds[batch].TryGetValue(name, out value))
            {
                feeds[name] = value;
            }
            else if (extraFeeds is not null && extraFeeds[batch].TryGetValue(name, out value))
            {
                feeds[name] = value;
            }
            else
            {
                throw new InvalidOperationException($"No value for session input '{name}'.");
            }
        }

        return feeds;
    }

    private List<OutputTensor> Run(
        InferenceSession session,
        IReadOnlyList<string> outputNames,
        IReadOnlyDictionary<string, OrtValue>? feedsOverride,
        IReadOnlyList<Dictionary<string, OrtValue>>? extraFeeds)
    {
        var parts = outputNames.Select(_ => new List<Array>(_plan.BatchCount)).ToList();
        var shapes = new long[outputNames.Count][];
        for (var b = 0; b < _plan.BatchCount; b++)
        {
            var (_, count) = _plan.Batch(b);
            var inputs = Feeds(session, b, feedsOverride, extraFeeds);
            using var results = session.Run(_runOptions, inputs.Keys.ToList(), inputs.Values.ToList(), outputNames.ToList());
            for (var o = 0; o < outputNames.Count; o++)
            {
                parts[o].Add(OrtTensors.CopyRows(results[o], count, out var shape));
                shapes[o] = shape;
            }
        }

        var outputs = new List<OutputTensor>(outputNames.Count);
        for (var o = 0; o < outputNames.Count; o++)
        {
            var shape = shapes[o].ToArray();
            if (shape.Length > 0)
            {
                shape[0] = parts[o].Count == 1 ? shape[0] : _data.SampleCount;
            }

            outputs.Add(new OutputTensor(outputNames[o], OrtTensors.ToFloat(OrtTensors.Concatenate(parts[o])), shape));
        }

        return outputs;
    }

    private static void DisposeFeeds(IEnumerable<Dictionary<string, OrtValue>> feeds)
    {
        foreach (var feed in feeds)
        {
            foreach (var value in feed.Values)
            {
                value.Dispose();
            }
        }
    }
}
