using Bitbudget.Search.Manifest;

namespace Bitbudget.Service.Api;

/// <summary>
/// Pairs the layers of two manifests: first by name; then, among the layers still unpaired, by operator and
/// weight shape in graph order (an exporter that renumbers its nodes moves names, not shapes). What is left
/// is removed (base only) or added (other only).
/// </summary>
internal static class LayerMatcher
{
    public static IReadOnlyList<ComparedLayer> Compare(IReadOnlyList<ManifestLayer> baseLayers, IReadOnlyList<ManifestLayer> otherLayers)
    {
        var otherByName = new Dictionary<string, ManifestLayer>(StringComparer.Ordinal);
        foreach (var layer in otherLayers)
        {
            otherByName.TryAdd(layer.Name, layer);
        }

        var pairs = new ManifestLayer?[baseLayers.Count];
        var taken = new HashSet<ManifestLayer>(ReferenceEqualityComparer.Instance);
        for (var i = 0; i < baseLayers.Count; i++)
        {
            if (otherByName.TryGetValue(baseLayers[i].Name, out var match) && taken.Add(match))
            {
                pairs[i] = match;
            }
        }

        // Unpaired layers of one shape are paired in the order they appear, so two renamed 3x3 convolutions keep their places.
        var waiting = otherLayers.Where(l => !taken.Contains(l)).GroupBy(ShapeKey).ToDictionary(g => g.Key, g => new Queue<ManifestLayer>(g));
        var byShape = new bool[baseLayers.Count];
        for (var i = 0; i < baseLayers.Count; i++)
        {
            if (pairs[i] is null && waiting.TryGetValue(ShapeKey(baseLayers[i]), out var queue) && queue.TryDequeue(out var match))
            {
                pairs[i] = match;
                byShape[i] = true;
                taken.Add(match);
            }
        }

        var compared = new List<ComparedLayer>();
        for (var i = 0; i < baseLayers.Count; i++)
        {
            compared.Add(pairs[i] is { } other ? Pair(baseLayers[i], other, byShape[i]) : OneSide(baseLayers[i], onBase: true));
        }

        compared.AddRange(otherLayers.Where(l => !taken.Contains(l)).Select(l => OneSide(l, onBase: false)));
        return compared;
    }

    private static string ShapeKey(ManifestLayer layer) => layer.Op + ":" + string.Join('x', layer.Shape);

    private static ComparedLayer Pair(ManifestLayer a, ManifestLayer b, bool byShape)
    {
        var widths = a.Sensitivity.Select(s => s.Bits).Union(b.Sensitivity.Select(s => s.Bits)).Order();
        return new ComparedLayer(
            a.Name,
            a.Name == b.Name ? null : b.Name,
            a.Bits == b.Bits ? "same" : "changed",
            byShape ? "shape" : "name",
            a.Op,
            a.Shape,
            a.Shape.SequenceEqual(b.Shape) ? null : b.Shape,
            ComparedValue.Of(a.Parameters, b.Parameters),
            ComparedValue.Of(a.Bits, b.Bits),
            widths.Select(bits => Width(bits, At(a, bits), At(b, bits))).ToList(),
            a.Coverage?.Status,
            b.Coverage?.Status);
    }

    private static ComparedLayer OneSide(ManifestLayer layer, bool onBase) => new(
        layer.Name,
        null,
        onBase ? "removed" : "added",
        null,
        layer.Op,
        layer.Shape,
        null,
        onBase ? ComparedValue.Of(layer.Parameters, null) : ComparedValue.Of(null, layer.Parameters),
        onBase ? ComparedValue.Of(layer.Bits, null) : ComparedValue.Of(null, layer.Bits),
        layer.Sensitivity.Select(s => onBase ? Width(s.Bits, s, null) : Width(s.Bits, null, s)).ToList(),
        onBase ? layer.Coverage?.Status : null,
        onBase ? null : layer.Coverage?.Status);

    private static ManifestSensitivity? At(ManifestLayer layer, int bits) => layer.Sensitivity.FirstOrDefault(s => s.Bits == bits);

    private static ComparedWidth Width(int bits, ManifestSensitivity? a, ManifestSensitivity? b) => new(
        bits,
        ComparedValue.Of(a?.Metrics.SqnrDb, b?.Metrics.SqnrDb),
        ComparedValue.Of(a?.AdditiveError, b?.AdditiveError));
}
