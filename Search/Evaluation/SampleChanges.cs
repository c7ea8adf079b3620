using System.Runtime.InteropServices;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// How many calibration samples a trial changed: a sample counts when any bit of any of its output rows
/// differs from the FP32 reference. This is how coverage is judged: a layer whose trials change no sample
/// at any width was never reached by the calibration data (or only ever saw zeros).
/// </summary>
public static class SampleChanges
{
    /// <summary>
    /// Samples (0..<paramref name="sampleCount"/>) whose outputs differ bit for bit. Outputs are laid out with
    /// the samples on axis 0 (<see cref="OutputTensor"/>); an output without that axis (a scalar, or a first
    /// axis of another size) cannot be split by sample, so any change in it counts every sample as changed.
    /// </summary>
    public static int Count(IReadOnlyList<OutputTensor> reference, IReadOnlyList<OutputTensor> trial, int sampleCount)
    {
        ArgumentNullException.ThrowIfNull(reference);
        ArgumentNullException.ThrowIfNull(trial);
        if (sampleCount <= 0)
        {
            return 0;
        }

        var changed = new bool[sampleCount];
        var count = 0;
        for (var o = 0; o < reference.Count && count < sampleCount; o++)
        {
            // Bitwise, not numeric: -0 vs +0 and NaN payloads are changes too, and the integer compare vectorises.
            var r = MemoryMarshal.Cast<float, int>(reference[o].Data.AsSpan());
            var t = MemoryMarshal.Cast<float, int>(trial[o].Data.AsSpan());
            var shape = reference[o].Shape;
            if (shape.Count == 0 || shape[0] != sampleCount || r.Length % sampleCount != 0)
            {
                if (!r.SequenceEqual(t))
                {
                    return sampleCount;
                }

                continue;
            }

            var row = r.Length / sampleCount;
            for (var s = 0; s < sampleCount; s++)
            {
                if (!changed[s] && !r.Slice(s * row, row).SequenceEqual(t.Slice(s * row, row)))
                {
                    changed[s] = true;
                    count++;
                }
            }
        }

        return count;
    }
}
