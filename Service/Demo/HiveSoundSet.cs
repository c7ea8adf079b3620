namespace Bitbudget.Service.Demo;

/// <summary>
/// A batch of hive-sound spectrogram patches in NCHW order ([Count, 1, Bands, Frames], band 0 the
/// lowest frequency) with one class label per patch.
/// </summary>
internal sealed record HiveSoundSet(float[] Spectrograms, long[] Labels)
{
    public const int Bands = 16;
    public const int Frames = 16;
    public const int PatchLength = Bands * Frames;

    public int Count => Labels.Length;

    public ReadOnlySpan<float> Patch(int index) => Spectrograms.AsSpan(index * PatchLength, PatchLength);

    public int[] Shape => [Count, 1, Bands, Frames];
}
