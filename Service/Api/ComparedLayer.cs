namespace Bitbudget.Service.Api;

/// <summary>One layer of a comparison.</summary>
/// <param name="Name">The layer's name on the base side (on the other side for an added layer).</param>
/// <param name="OtherName">The matched layer's name on the other side when it differs (matched by weight shape); else null.</param>
/// <param name="Status">"same" (same chosen width), "changed" (another width), "added" (other side only) or "removed" (base side only).</param>
/// <param name="OtherShape">The other side's weight shape when it differs from <paramref name="Shape"/> (a layer that kept its name but grew); else null.</param>
/// <param name="MatchedBy">"name" or "shape"; null for an added or removed layer.</param>
/// <param name="Bits">Chosen width on each side; null for a layer kept FP32 (excluded) or absent.</param>
/// <param name="Coverage">Whether the calibration set reached the layer on each side ("exercised", "barely-exercised", "not-exercised"); null where unknown.</param>
internal sealed record ComparedLayer(
    string Name,
    string? OtherName,
    string Status,
    string? MatchedBy,
    string Op,
    IReadOnlyList<long> Shape,
    IReadOnlyList<long>? OtherShape,
    ComparedValue Parameters,
    ComparedValue Bits,
    IReadOnlyList<ComparedWidth> Sensitivity,
    string? BaseCoverage,
    string? OtherCoverage);
